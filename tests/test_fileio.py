"""Atomic writes: an interrupted or failed write leaves no partial file."""

import os

import pytest

from splatter.deliver.fileio import atomic_path, atomic_write, atomic_write_bytes, atomic_write_text


def test_success_replaces_target_and_leaves_no_temp(tmp_path):
    target = tmp_path / "a.txt"
    target.write_text("old")
    atomic_write_text(target, "new")
    assert target.read_text() == "new"
    assert sorted(os.listdir(tmp_path)) == ["a.txt"]


def test_failed_write_leaves_no_temp_and_no_target(tmp_path):
    target = tmp_path / "b.exr"

    def boom(tmp):
        assert tmp.endswith(".exr")  # writers that check the extension accept it
        assert os.path.dirname(tmp) == str(tmp_path)  # same folder: rename is atomic
        with open(tmp, "wb") as f:
            f.write(b"half a file")
        raise RuntimeError("disk on fire")

    with pytest.raises(RuntimeError):
        atomic_write(target, boom)
    assert os.listdir(tmp_path) == []


def test_failed_write_keeps_previous_file(tmp_path):
    target = tmp_path / "c.png"
    target.write_bytes(b"previous")
    with pytest.raises(KeyboardInterrupt):
        with atomic_path(target) as tmp:
            open(tmp, "wb").write(b"partial")
            raise KeyboardInterrupt
    assert target.read_bytes() == b"previous"
    assert os.listdir(tmp_path) == ["c.png"]


def test_missing_folder_is_an_error(tmp_path):
    with pytest.raises(FileNotFoundError, match="path"):
        atomic_write_text(tmp_path / "nope" / "x.txt", "x")


def test_a_target_that_is_a_folder_is_named_not_the_temporary_file(tmp_path):
    # The error names the file the caller asked for; the hidden temporary name means nothing to a user.
    target = tmp_path / "quay.0000.png"
    target.mkdir()
    with pytest.raises(IsADirectoryError) as info:
        atomic_write_bytes(target, b"x")
    assert info.value.filename == str(target)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["quay.0000.png"]
