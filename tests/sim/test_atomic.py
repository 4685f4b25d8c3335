"""Tests of sim.io.atomic: one atomic, durable file write with the permissions of a plain open().

The expected modes are POSIX's rule for a newly created file: requested mode 0o666 with the bits of
the process umask cleared (POSIX open(2), O_CREAT; common practice, no source needed beyond the
standard), checked against what the standard library's own ``open`` gives in the same folder.
"""

from __future__ import annotations

import errno
import os
import pickle
import stat
import threading

import pytest

from sim.io.atomic import TEMP_PREFIX, AtomicWriteError, write_atomic, write_text_atomic

posix_only = pytest.mark.skipif(os.name != "posix", reason="file modes and umask are POSIX")


@pytest.fixture
def umask():
    """``os.umask`` for use inside a test; the umask in force before the test is restored after it."""
    old = os.umask(0o077)
    os.umask(old)
    yield os.umask
    os.umask(old)


def _mode(path) -> int:
    return stat.S_IMODE(os.stat(path).st_mode)


@posix_only
@pytest.mark.parametrize("mask, expected", [(0o022, 0o644), (0o077, 0o600), (0o002, 0o664)])
def test_mode_follows_umask_like_plain_open(tmp_path, umask, mask, expected):
    umask(mask)
    new = write_text_atomic(tmp_path / "new.txt", "x\n")
    replaced = tmp_path / "old.txt"
    replaced.write_text("old\n")
    os.chmod(replaced, 0o600)
    write_atomic(replaced, lambda h: h.write(b"new\n"))
    with open(tmp_path / "plain.txt", "w") as handle:  # the reference: the standard library's open()
        handle.write("x\n")
    assert _mode(new) == expected == _mode(tmp_path / "plain.txt")
    assert _mode(replaced) == expected  # a replaced file gets the umask mode too (module docstring)


def test_contents_intact_and_no_temporary_left(tmp_path):
    data = bytes(range(256)) * 1000 + b"\r\n\n\x00"
    out = write_atomic(tmp_path / "data.bin", lambda h: h.write(data))
    assert out == tmp_path / "data.bin"
    assert out.read_bytes() == data
    text = "première ligne\r\nsecond line\n"
    write_text_atomic(tmp_path / "t.txt", text)
    assert (tmp_path / "t.txt").read_bytes() == text.encode("utf-8")  # no newline translation
    assert sorted(p.name for p in tmp_path.iterdir()) == ["data.bin", "t.txt"]


def test_writer_sees_temporary_in_destination_folder(tmp_path):
    seen = []

    def write(handle):
        seen.extend(p.name for p in tmp_path.iterdir())
        handle.write(b"x")

    write_atomic(tmp_path / "a.csv", write)
    (name,) = seen
    assert name.startswith(TEMP_PREFIX + "a.csv.") and name.endswith(".tmp")
    assert [p.name for p in tmp_path.iterdir()] == ["a.csv"]


@pytest.mark.parametrize("error", [RuntimeError("boom"), KeyboardInterrupt()])
def test_exception_in_write_leaves_old_file_and_no_temporary(tmp_path, error):
    path = tmp_path / "keep.txt"
    path.write_bytes(b"old")

    def write(handle):
        handle.write(b"half of the new content")
        raise error

    with pytest.raises(type(error)):
        write_atomic(path, write)
    assert path.read_bytes() == b"old"
    assert [p.name for p in tmp_path.iterdir()] == ["keep.txt"]
    with pytest.raises(type(error)):
        write_atomic(tmp_path / "new.txt", write)
    assert [p.name for p in tmp_path.iterdir()] == ["keep.txt"]


def test_no_clobber_without_force(tmp_path):
    path = tmp_path / "t.txt"
    path.write_text("old\n")
    with pytest.raises(AtomicWriteError, match=r"t\.txt: exists; pass force=True to overwrite") as info:
        write_text_atomic(path, "new\n", force=False)
    assert isinstance(info.value, OSError) and info.value.errno == errno.EEXIST
    assert info.value.path == path and info.value.reason.startswith("exists")
    assert path.read_text() == "old\n"
    write_text_atomic(path, "new\n")  # force=True is the default
    assert path.read_text() == "new\n"
    assert [p.name for p in tmp_path.iterdir()] == ["t.txt"]


def test_no_clobber_when_the_file_appears_during_the_write(tmp_path):
    path = tmp_path / "race.txt"

    def write(handle):
        path.write_text("written by someone else\n")  # appears after the up-front check
        handle.write(b"ours\n")

    with pytest.raises(AtomicWriteError, match="exists") as info:
        write_atomic(path, write, force=False)
    assert info.value.errno == errno.EEXIST
    assert path.read_text() == "written by someone else\n"
    assert [p.name for p in tmp_path.iterdir()] == ["race.txt"]


def test_new_file_without_force(tmp_path):
    out = write_text_atomic(tmp_path / "fresh.txt", "a\n", force=False)
    assert out.read_text() == "a\n"
    assert [p.name for p in tmp_path.iterdir()] == ["fresh.txt"]


@pytest.mark.parametrize("make, code, message", [
    (lambda d: d / "missing" / "f.txt", errno.ENOENT, "does not exist; create it first"),
    (lambda d: d, errno.EISDIR, "is a folder; give a file name"),
])
def test_bad_destinations(tmp_path, make, code, message):
    with pytest.raises(AtomicWriteError, match=message) as info:
        write_text_atomic(make(tmp_path), "x")
    assert info.value.errno == code
    assert str(info.value).startswith(str(make(tmp_path)))
    assert list(tmp_path.iterdir()) == []


def test_error_pickles_with_its_fields(tmp_path):
    err = AtomicWriteError(tmp_path / "f", "exists; pass force=True to overwrite", errno.EEXIST)
    back = pickle.loads(pickle.dumps(err))
    assert type(back) is AtomicWriteError and str(back) == str(err)
    assert (back.path, back.reason, back.errno) == (err.path, err.reason, err.errno)


def test_concurrent_writers_leave_one_complete_file(tmp_path):
    path = tmp_path / "shared.txt"
    payloads = [(f"writer {i}\n" * 5000).encode() for i in range(8)]
    threads = [threading.Thread(target=write_atomic, args=(path, (lambda p: lambda h: h.write(p))(p)))
               for p in payloads]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert path.read_bytes() in payloads
    assert [p.name for p in tmp_path.iterdir()] == ["shared.txt"]


def test_bad_arguments(tmp_path):
    with pytest.raises(TypeError, match="write: expected a callable"):
        write_atomic(tmp_path / "f", b"bytes")
    with pytest.raises(TypeError, match="text: expected str"):
        write_text_atomic(tmp_path / "f", b"bytes")
    assert list(tmp_path.iterdir()) == []
