"""Temporary run folders of this program, and the removal of those left behind by a killed run.

A run is written into a hidden sibling of its output folder, ``.<name>.tmp-<12 hex digits>``,
renamed into place at the end. A process killed outright (SIGKILL, power loss) cannot clean up, so
the folder holds an owner file naming the writing process (program, host, pid and the process's
start time where the system reports it). The next run into the same output folder removes such
folders when, and only when, they are recognisably this program's (name pattern and owner file) and
their writer is no longer running on this host. Anything else is left alone.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import socket
import uuid
from pathlib import Path
from typing import Any

__all__ = ["OWNER_FILE", "temporary_folder_for", "write_owner", "remove_owner", "remove_leftovers"]

OWNER_FILE = ".hazardtrace-writer.json"
_PROGRAM = "hazardtrace"


def _pattern(out_dir: Path) -> re.Pattern[str]:
    return re.compile(r"\." + re.escape(out_dir.name) + r"\.tmp-[0-9a-f]{12}")


def temporary_folder_for(out_dir: Path) -> Path:
    """A fresh hidden sibling name for writing ``out_dir``."""
    return out_dir.parent / f".{out_dir.name}.tmp-{uuid.uuid4().hex[:12]}"


def _start_time(pid: int) -> str | None:
    """The process's start time in clock ticks since boot (Linux ``/proc``), to tell a reused pid
    apart; ``None`` where the system does not say."""
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return None
    # the command name (field 2) is in parentheses and may hold spaces: split after its end
    return stat[stat.rindex(")") + 2:].split()[19]


def _owner() -> dict[str, Any]:
    pid = os.getpid()
    return {"program": _PROGRAM, "host": socket.gethostname(), "pid": pid, "start": _start_time(pid)}


def write_owner(folder: Path) -> None:
    """Record this process as the writer of temporary ``folder``."""
    with open(folder / OWNER_FILE, "x", encoding="utf-8") as handle:
        json.dump(_owner(), handle)


def remove_owner(folder: Path) -> None:
    """Drop the owner file before the folder becomes the output."""
    (folder / OWNER_FILE).unlink(missing_ok=True)


def _writer_gone(owner: Any) -> bool:
    """Whether the process recorded in ``owner`` has certainly ended (same host, pid not running, or
    running with another start time: the pid was reused)."""
    if not isinstance(owner, dict) or owner.get("program") != _PROGRAM:
        return False
    if owner.get("host") != socket.gethostname() or not isinstance(owner.get("pid"), int):
        return False
    pid = owner["pid"]
    if pid == os.getpid():
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return True
    except PermissionError:  # a live process of another user
        return False
    except OSError:
        return False
    started = owner.get("start")
    now = _start_time(pid)
    return started is not None and now is not None and now != started


def remove_leftovers(out_dir: Path) -> list[Path]:
    """Remove temporary folders left beside ``out_dir`` by killed runs of this program.

    Returns the folders removed. Only folders named like this program's temporary folders for
    ``out_dir``, holding a readable owner file whose writer has ended, are removed.
    """
    parent, pattern, removed = out_dir.parent, _pattern(out_dir), []
    try:
        entries = list(parent.iterdir())
    except OSError:
        return removed
    for entry in entries:
        if not pattern.fullmatch(entry.name) or entry.is_symlink() or not entry.is_dir():
            continue
        try:
            owner = json.loads((entry / OWNER_FILE).read_text(encoding="utf-8"))
        except (OSError, ValueError):
            continue
        if _writer_gone(owner):
            shutil.rmtree(entry, ignore_errors=True)
            removed.append(entry)
    return removed
