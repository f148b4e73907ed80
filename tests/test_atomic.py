"""Atomic output: all or nothing, and no silent overwrite."""
import pytest

from geosim.errors import InputError
from geosim.io.atomic import atomic_output


def test_success_moves_file_into_place_and_leaves_no_temporary(tmp_path):
    target = tmp_path / "out.csv"
    with atomic_output(target) as tmp:
        assert tmp.parent == tmp_path
        assert tmp.suffix == ".csv"
        assert not target.exists()  # nothing visible until the write succeeded
        tmp.write_text("a,b\n1,2\n")
    assert target.read_text() == "a,b\n1,2\n"
    assert [p.name for p in tmp_path.iterdir()] == ["out.csv"]


def test_error_removes_temporary_and_keeps_old_file(tmp_path):
    target = tmp_path / "out.csv"
    target.write_text("old")
    with pytest.raises(RuntimeError, match="disk on fire"):
        with atomic_output(target, overwrite=True) as tmp:
            tmp.write_text("half")
            raise RuntimeError("disk on fire")
    assert target.read_text() == "old"
    assert [p.name for p in tmp_path.iterdir()] == ["out.csv"]


def test_existing_file_is_refused_with_a_fix(tmp_path):
    target = tmp_path / "out.csv"
    target.write_text("old")
    with pytest.raises(InputError) as info:
        with atomic_output(target):
            pytest.fail("the body must not run when the target exists")
    assert str(target) in str(info.value)
    assert "overwrite=True" in str(info.value) and "--overwrite" in str(info.value)
    assert target.read_text() == "old"


def test_overwrite_replaces(tmp_path):
    target = tmp_path / "out.csv"
    target.write_text("old")
    with atomic_output(target, overwrite=True) as tmp:
        tmp.write_text("new")
    assert target.read_text() == "new"


def test_file_appearing_during_write_is_not_clobbered(tmp_path):
    target = tmp_path / "out.csv"
    with pytest.raises(InputError):
        with atomic_output(target) as tmp:
            tmp.write_text("mine")
            target.write_text("someone else's")
    assert target.read_text() == "someone else's"
    assert [p.name for p in tmp_path.iterdir()] == ["out.csv"]


def test_missing_folder_and_empty_write_are_errors(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        with atomic_output(tmp_path / "nope" / "out.csv"):
            pass
    with pytest.raises(FileNotFoundError, match="nothing was written"):
        with atomic_output(tmp_path / "out.csv"):
            pass
    assert list(tmp_path.iterdir()) == []
