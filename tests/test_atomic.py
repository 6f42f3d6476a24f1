"""No half-written output: a failure while writing leaves the target as it was."""

import pytest

from debrief.errors import InputError
from debrief.io.atomic import atomic_path, write_text_atomic


def test_success_replaces(tmp_path):
    target = tmp_path / "out.txt"
    target.write_text("old")
    write_text_atomic(target, "new")
    assert target.read_text() == "new"
    assert [p.name for p in tmp_path.iterdir()] == ["out.txt"]


def test_failure_leaves_nothing(tmp_path):
    target = tmp_path / "out.txt"
    with pytest.raises(RuntimeError):
        with atomic_path(target) as tmp:
            tmp.write_text("half")
            raise RuntimeError("boom")
    assert not target.exists()
    assert list(tmp_path.iterdir()) == []


def test_missing_folder(tmp_path):
    with pytest.raises(InputError, match="output folder does not exist"):
        write_text_atomic(tmp_path / "nope" / "out.txt", "x")


def test_result_has_ordinary_permissions(tmp_path):
    import os
    import stat

    write_text_atomic(tmp_path / "a.txt", "x")
    plain = tmp_path / "b.txt"
    plain.write_text("x")
    assert stat.S_IMODE(os.stat(tmp_path / "a.txt").st_mode) == stat.S_IMODE(os.stat(plain).st_mode)
