"""The one atomic writer: whole files or nothing, and one clear OutputError per failure.

Failures of the operating system are produced for real where a test can (a file standing
where a folder is needed, a folder where the file should go, a name too long for the file
system) and injected where it cannot (a full disk: ``os.fsync`` made to fail with ENOSPC,
the error a full file system reports).
"""

from __future__ import annotations

import errno
import os

import pytest

from kinetics.atomic import write_atomic
from kinetics.errors import KineticsError, OutputError


def _leftovers(folder):
    return sorted(name for name in os.listdir(folder) if name.endswith(".tmp"))


def test_writes_bytes_and_text_and_replaces_the_old_version(tmp_path):
    target = tmp_path / "deep" / "table.csv"
    assert write_atomic(target, "a,b\n1,2\n") == target
    assert target.read_text() == "a,b\n1,2\n"
    write_atomic(target, b"\x89PNG")
    assert target.read_bytes() == b"\x89PNG"
    assert oct(target.stat().st_mode & 0o777) == oct(0o644)
    assert _leftovers(target.parent) == []


def test_a_file_where_the_folder_should_be(tmp_path):
    (tmp_path / "report").write_text("not a folder")
    with pytest.raises(OutputError, match="a file stands where a folder is needed") as caught:
        write_atomic(tmp_path / "report" / "report.html", "<html>")
    assert str(tmp_path / "report") in str(caught.value) and "\n" not in str(caught.value)


def test_a_folder_where_the_file_should_be(tmp_path):
    (tmp_path / "fit.json").mkdir()
    with pytest.raises(OutputError, match="a folder stands where the file") as caught:
        write_atomic(tmp_path / "fit.json", "{}")
    assert isinstance(caught.value, KineticsError)
    assert _leftovers(tmp_path) == []


def test_a_name_too_long_for_the_file_system(tmp_path):
    with pytest.raises(OutputError, match="too long"):
        write_atomic(tmp_path / ("x" * 10_000) / "a.csv", "1")


def test_full_disk_keeps_the_old_version_and_leaves_no_temporary_file(tmp_path, monkeypatch):
    target = tmp_path / "series.csv"
    write_atomic(target, "old\n")

    def full(fd):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(os, "fsync", full)
    with pytest.raises(OutputError, match="disk full") as caught:
        write_atomic(target, "new\n")
    assert "free space" in str(caught.value)
    assert target.read_text() == "old\n"
    assert _leftovers(tmp_path) == []


def test_text_that_the_encoding_cannot_hold_is_refused_before_writing(tmp_path):
    target = tmp_path / "spectrum.dx"
    with pytest.raises(UnicodeEncodeError):
        write_atomic(target, "##TITLE= µ\n", encoding="ascii")
    assert not target.exists() and _leftovers(tmp_path) == []
