"""One call that writes a report as HTML or PDF (by the file's suffix), atomically."""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from pathlib import Path

import pandas as pd

from ..io import write_atomic
from ..io.export import ExportError
from .document import report_html
from .inputs import ReportInputs
from .pdf import pdf_bytes
from .plots import TraceRequest

__all__ = ["write_report", "REPORT_SUFFIXES"]

REPORT_SUFFIXES = (".html", ".htm", ".pdf")


def write_report(inputs: ReportInputs, path: str | os.PathLike[str], *, force: bool = False,
                 traces: Sequence[TraceRequest] | None = None,
                 psa_tables: Mapping[str, pd.DataFrame] | None = None) -> Path:
    """Write the report of ``inputs`` to ``path``: ``.html`` (one self-contained file) or ``.pdf``.

    Raises
    ------
    ExportError
        Another suffix.
    sim.io.AtomicWriteError
        ``path`` exists without ``force``, or its folder does not.
    """
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix not in REPORT_SUFFIXES:
        raise ExportError(f"{path}: a report is written as .html or .pdf, not {suffix or 'a file without suffix'!r}",
                          key=("output",), value=str(path), file=path, rule="must end in .html or .pdf")
    html = report_html(inputs, traces=traces, psa_tables=psa_tables)
    data = pdf_bytes(html) if suffix == ".pdf" else html.encode("utf-8")
    return write_atomic(path, lambda handle: handle.write(data), force=force)
