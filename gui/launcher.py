"""The ``hazardtrace`` command: ``hazardtrace gui [SCENARIO]`` opens the desktop window; every other
verb is the headless command line in :mod:`sim.cli.commands`. Qt is imported only for ``gui``."""

from __future__ import annotations

import sys


def main(argv: list[str] | None = None) -> int:
    args = list(sys.argv[1:] if argv is None else argv)
    if args and args[0] == "gui":
        from gui.app import main as gui_main  # Qt only here

        return gui_main(args[1:])
    from sim.cli import main as cli_main

    return cli_main(args)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
