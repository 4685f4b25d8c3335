"""The ``hazardtrace`` command: ``hazardtrace gui [SCENARIO]`` opens the desktop window; every other
verb is the headless command line in :mod:`sim.cli.commands`. Qt is imported only to open the window:
``hazardtrace gui --help`` prints help, and a scenario file that does not exist is an error (exit 2)
before any window or display is needed."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

__all__ = ["main", "gui_parser"]


def gui_parser() -> argparse.ArgumentParser:
    """The arguments of ``hazardtrace gui``."""
    parser = argparse.ArgumentParser(prog="hazardtrace gui", description="Open the desktop window: edit a scenario, "
                                     "preview its hazards, run it and look at the results.")
    parser.add_argument("scenario", nargs="?", help="scenario file (.toml) to open (default: an untitled copy of "
                        "the bundled demo)")
    return parser


def main(argv: list[str] | None = None) -> int:
    try:
        return _main(argv)
    except KeyboardInterrupt:  # Ctrl-C at any moment, also while numpy, pandas or Qt are imported
        sys.stderr.write("\nhazardtrace: interrupted\n")
        return 130


def _main(argv: list[str] | None) -> int:
    args = list(sys.argv[1:] if argv is None else argv)
    if args and args[0] == "gui":
        try:
            options = gui_parser().parse_args(args[1:])
        except SystemExit as stop:  # --help (0) or a wrong argument (2): printed by argparse
            return int(stop.code or 0)
        if options.scenario is not None and not Path(options.scenario).is_file():
            sys.stderr.write(f"hazardtrace gui: error: {options.scenario}: no such scenario file\n")
            return 2
        from gui.app import main as gui_main  # Qt only here

        return gui_main([options.scenario] if options.scenario else [])
    from sim.cli import main as cli_main

    return cli_main(args)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
