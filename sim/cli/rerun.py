"""``hazardtrace rerun RUN_DIR|RUN_DIR/metadata.json``: run a recorded run again and say whether
its event log is reproduced bit for bit.

Exit codes: 0 the event log is bit-identical; 2 it is not (what changed is named: the program's or a
library's version, an input file whose hash differs, ...) or the folder is not a run's; as ``main``
otherwise.
"""

from __future__ import annotations

import argparse
from typing import TextIO

from ..report import rerun

__all__ = ["register"]


def _rerun(args: argparse.Namespace, out: TextIO) -> int:
    r = rerun(args.run, workers=args.threads)
    out.write(f"Reran {args.run}: {r.patients:,} patients per strategy, seed {r.seed}, {r.threads} threads, "
              f"{r.chunk_size:,} patients per chunk.\n")
    changes = [d for d in r.differences if not d.startswith("note:")]
    notes = [d for d in r.differences if d.startswith("note:")]
    if r.identical:
        out.write(f"The event log is bit-identical (SHA-256 {r.new_hash}).\n")
    else:
        out.write(f"The event log differs: SHA-256 recorded {r.recorded_hash or 'none'}, now {r.new_hash}.\n")
        out.write("What differs since the run:\n" if changes else
                  "Nothing recorded differs (same version, libraries and input files); please report this "
                  "with the run folder.\n")
    if changes and r.identical:
        out.write("Recorded differences that did not change the event log:\n")
    for line in changes:
        out.write(f"  - {line}\n")
    for line in notes:
        out.write(f"  {line}\n")
    return 0 if r.identical else 2


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``rerun`` verb to the command line's sub-parsers."""
    p = sub.add_parser("rerun", help="rerun a recorded run and check that its event log is bit-identical",
                       description="Rerun from the run's recorded scenario copy, seed, patients and chunking with "
                                   "this installation; compare the event log's content hash with the recorded one "
                                   "and name what differs otherwise (version, input file changed). Writes nothing.")
    p.add_argument("run", metavar="RUN_DIR|METADATA", help="run folder written by 'hazardtrace run', or its metadata.json")
    p.add_argument("--threads", type=int, help="threads for the rerun (default: the recorded number; the log does "
                                               "not depend on it)")
    p.set_defaults(func=_rerun, needs_scenario=False)
