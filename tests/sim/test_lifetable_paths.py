"""Life-table paths that are not life tables (issue 13 item 6): ``read_life_table`` reads only regular
files, bounds what it reads, and never echoes a file's contents in its messages.

Each case must fail at once with a :class:`LifeTableError` that says what the path is and which rule
it breaks. The named pipe is read in a worker thread whose ``join`` timeout is only a safety net (so a
regression cannot hang the suite); the assertion is on the error the call returns.
"""

from __future__ import annotations

import os
import threading
import time
import zipfile
from pathlib import Path

import numpy as np
import openpyxl
import pytest

from sim.io.lifetable import LifeTableError, read_life_table
from sim.io.lifetable.reading import MAX_LIFE_TABLE_BYTES, MAX_XLSX_UNPACKED_BYTES

FAST = 2.0  # seconds: "at once" for a refusal that reads nothing (generous for a loaded 2-core VM)


def _read(path: Path | str) -> LifeTableError:
    """The error reading ``path`` as a one-column q table raises, with the time it took."""
    start = time.monotonic()
    with pytest.raises(LifeTableError) as info:
        read_life_table(path, kind="q", value_columns="q")
    assert time.monotonic() - start < FAST
    return info.value


def _only_problem(err: LifeTableError):
    assert len(err.problems) == 1
    return err.problems[0]


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="named pipes are POSIX")
def test_named_pipe_is_refused_without_blocking(tmp_path: Path) -> None:
    fifo = tmp_path / "table.csv"
    os.mkfifo(fifo)
    outcome: list[BaseException | None] = []

    def target() -> None:
        try:
            read_life_table(fifo, kind="q", value_columns="q")
        except BaseException as exc:  # noqa: BLE001 - handed to the main thread for the assertions
            outcome.append(exc)
        else:
            outcome.append(None)

    worker = threading.Thread(target=target, daemon=True)
    worker.start()
    worker.join(timeout=10.0)
    if worker.is_alive():  # safety net: a blocked open() returns once a writer comes and goes
        fd = os.open(fifo, os.O_WRONLY | os.O_NONBLOCK)
        os.close(fd)
        worker.join(timeout=10.0)
        pytest.fail("read_life_table blocked on a named pipe")
    assert len(outcome) == 1 and isinstance(outcome[0], LifeTableError), outcome
    problem = _only_problem(outcome[0])
    assert problem.path == ("path",)
    assert problem.file == str(fifo)
    assert problem.rule == "must be a regular file (a .csv or .xlsx life table), not a named pipe"
    assert str(outcome[0]) == f"{fifo}: {problem.rule}"


@pytest.mark.skipif(not os.path.exists("/dev/zero"), reason="needs /dev/zero")
def test_device_is_refused_without_being_read(tmp_path: Path) -> None:
    link = tmp_path / "zero.csv"  # the suffix passes the file-type check; the device must not be read
    link.symlink_to("/dev/zero")
    problem = _only_problem(_read(link))
    assert problem.rule.endswith("not a character device")
    assert problem.path == ("path",)


def test_directory_is_refused(tmp_path: Path) -> None:
    folder = tmp_path / "table.csv"
    folder.mkdir()
    problem = _only_problem(_read(folder))
    assert problem.rule.endswith("not a directory")


@pytest.mark.parametrize("suffix", [".csv", ".xlsx"])
def test_file_over_the_limit_is_refused_before_reading(tmp_path: Path, suffix: str) -> None:
    # A sparse file: 1 MiB + 1 byte on paper, no disk blocks; reading it would cost the time the
    # assertion in _read rules out, and parsing it would fail with some other message.
    path = tmp_path / f"huge{suffix}"
    with open(path, "wb") as fh:
        fh.truncate(MAX_LIFE_TABLE_BYTES + 1)
    err = _read(path)
    problem = _only_problem(err)
    assert problem.value == MAX_LIFE_TABLE_BYTES + 1
    assert problem.rule.startswith(f"must be at most {MAX_LIFE_TABLE_BYTES} bytes")
    assert str(MAX_LIFE_TABLE_BYTES + 1) in str(err)


def test_file_at_the_limit_is_read(tmp_path: Path) -> None:
    # A valid table whose unused 'note' cell pads it to exactly the limit: read.
    path = tmp_path / "padded.csv"
    head, tail = b"age,q,note\n0,0.01,", b"\n1,1,\n"
    path.write_bytes(head + b"x" * (MAX_LIFE_TABLE_BYTES - len(head) - len(tail)) + tail)
    assert path.stat().st_size == MAX_LIFE_TABLE_BYTES
    table = read_life_table(path, kind="q", value_columns="q")
    assert table.ages == (0.0, 1.0)
    assert table.values == {"all": (0.01, 1.0)}


def test_workbook_unpacking_beyond_the_limit_is_refused(tmp_path: Path) -> None:
    # A small workbook with one highly compressible part: a few kilobytes on disk, more than the
    # limit once unpacked (a "zip bomb" in miniature). Refused from the archive's directory, unread.
    path = tmp_path / "bomb.xlsx"
    wb = openpyxl.Workbook()
    wb.active.append(["age", "q"])
    wb.save(path)
    with zipfile.ZipFile(path, "a", compression=zipfile.ZIP_DEFLATED) as archive:
        archive.writestr("xl/padding.bin", b"\0" * (MAX_XLSX_UNPACKED_BYTES + 1))
    assert path.stat().st_size < MAX_LIFE_TABLE_BYTES
    problem = _only_problem(_read(path))
    assert problem.value > MAX_XLSX_UNPACKED_BYTES
    assert problem.rule.startswith(f"must unpack to at most {MAX_XLSX_UNPACKED_BYTES} bytes")


@pytest.mark.parametrize("suffix, rule", [(".csv", "cannot be read as CSV"),
                                          (".xlsx", "cannot be read as an .xlsx workbook")])
def test_binary_file_is_a_clean_error(tmp_path: Path, suffix: str, rule: str) -> None:
    path = tmp_path / f"noise{suffix}"
    path.write_bytes(np.random.default_rng(13).integers(0, 256, 4096, dtype=np.uint8).tobytes())
    err = _read(path)
    problem = _only_problem(err)
    assert problem.rule.startswith(rule)
    assert problem.file == str(path)
    assert len(str(err)) < len(str(path)) + 200  # one bounded line, no dump of the bytes
    assert str(err).isprintable()


SECRET_LINES = ["root:x:0:0:root:/root:/bin/bash",
                "daemon:x:1:1:daemon:/usr/sbin:/usr/sbin/nologin",
                "alice:$6$saltsalt$0123456789abcdefghijklmnopqrstuvwxyz:19000:0:99999:7:::"]


def _assert_no_echo(text: str) -> None:
    """No line of the file, nor any 21-character stretch of one, appears in ``text``."""
    for line in SECRET_LINES:
        for start in range(0, len(line) - 20):
            assert line[start:start + 21] not in text, (line, text)


def test_system_file_as_a_table_does_not_echo_its_lines(tmp_path: Path) -> None:
    # A file in the form of /etc/passwd (no commas: one column per line). The header is its first line.
    path = tmp_path / "passwd.csv"
    path.write_text("\n".join(SECRET_LINES) + "\n", encoding="utf-8")
    err = _read(path)
    problem = _only_problem(err)
    assert problem.line == 1 and problem.path == ("age",)
    assert problem.rule.startswith("column 'age' (age) not found; columns found: 'root:x:0:0:root:/roo...'")
    _assert_no_echo(str(err))
    _assert_no_echo(repr(err.problems))


def test_non_numeric_cell_is_quoted_as_a_short_sanitised_excerpt(tmp_path: Path) -> None:
    path = tmp_path / "t.csv"
    path.write_text("age,q\n0,0.01\n1," + SECRET_LINES[2] + "\x07\n", encoding="utf-8")
    err = _read(path)
    problem = _only_problem(err)
    assert (problem.file, problem.line, problem.path, problem.rule) == (str(path), 3, ("q",), "must be a number")
    assert problem.value == "alice:$6$saltsalt$01..."  # the first 20 characters
    assert str(err) == f"{path} line 3, column 'q': 'alice:$6$saltsalt$01...' is not a number"
    _assert_no_echo(str(err))


def test_control_characters_are_replaced_in_excerpts(tmp_path: Path) -> None:
    path = tmp_path / "t.csv"
    path.write_bytes(b"age,q\n0,0.01\n1,a\x1b[2Jb\n")
    problem = _only_problem(_read(path))
    assert problem.value == "a?[2Jb"  # the terminal escape is not passed through


def test_many_header_cells_are_listed_briefly(tmp_path: Path) -> None:
    path = tmp_path / "t.csv"
    path.write_text(",".join(f"column_with_a_long_name_{i}" for i in range(30)) + "\n1\n", encoding="utf-8")
    problem = _only_problem(_read(path))
    assert problem.rule == ("column 'age' (age) not found; columns found: "
                            + ", ".join(["'column_with_a_long_n...'"] * 8) + " and 22 more")


def test_xlsx_sheet_list_is_bounded(tmp_path: Path) -> None:
    wb = openpyxl.Workbook()
    for i in range(12):
        wb.create_sheet(f"s{i}")
    path = tmp_path / "t.xlsx"
    wb.save(path)
    with pytest.raises(LifeTableError) as info:
        read_life_table(path, kind="q", value_columns="q", sheet="missing")
    assert info.value.problems[0].rule == ("must be a sheet of the workbook: 'Sheet', 's0', 's1', 's2', 's3', "
                                           "'s4', 's5', 's6' and 5 more")


def test_missing_file_is_still_file_not_found(tmp_path: Path) -> None:
    with pytest.raises(FileNotFoundError):
        read_life_table(tmp_path / "absent.csv", kind="q", value_columns="q")
    with pytest.raises(FileNotFoundError):
        read_life_table(tmp_path / "absent.xlsx", kind="q", value_columns="q")
