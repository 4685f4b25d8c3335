"""Reports a reviewer can check: one self-contained HTML file (and its PDF) from a finished run,
comparison or probabilistic analysis, and the rerun that reproduces a run from its metadata."""

__all__: list[str] = []
