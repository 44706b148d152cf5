"""The one atomic writer (data/atomic_files.py): exact temp names, symlinks refused, failures leave no trace."""

import errno
import os

import pytest

from rntn_engine.data.atomic_files import (
    atomic_output,
    is_our_temp_file,
    temp_name_for,
    write_atomically,
)
from rntn_engine.run.run_directory import remove_leftover_temp_files


def test_temp_names_are_recognised_exactly(tmp_path):
    ours = temp_name_for(tmp_path / "checkpoint-step000000004.h5")
    assert ours.parent == tmp_path and is_our_temp_file(ours)
    for name in (".notes.h5.backup.tmp", ".checkpoint-step000000004.h5.123.tmp", "model.h5.123.rntn-tmp",
                 ".model.h5.12a.rntn-tmp", ".model.h5.123.rntn-tmp.old", "config.toml"):
        assert not is_our_temp_file(tmp_path / name), name


def test_the_cleaner_deletes_only_our_leftovers(tmp_path):
    ours = tmp_path / ".checkpoint-step000000004.h5.4242.rntn-tmp"
    theirs = [tmp_path / ".notes.h5.backup.tmp", tmp_path / ".metrics.jsonl.77.part", tmp_path / "x.rntn-tmp"]
    for p in [ours, *theirs]:
        p.write_bytes(b"x")
    assert remove_leftover_temp_files(tmp_path) == [ours]
    assert all(p.exists() for p in theirs) and not ours.exists()


def test_replaces_atomically_and_leaves_no_temporary(tmp_path):
    path = tmp_path / "a.bin"
    path.write_bytes(b"old")
    write_atomically(path, b"new" * 1000)
    assert path.read_bytes() == b"new" * 1000
    assert [p.name for p in tmp_path.iterdir()] == ["a.bin"]


@pytest.mark.parametrize("point", ["before_open", "mid_write", "before_fsync", "before_rename"])
def test_a_failure_before_the_rename_keeps_the_old_file(tmp_path, point):
    path = tmp_path / "a.bin"
    path.write_bytes(b"old")

    def disk_full(where):
        if where == point:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    with pytest.raises(OSError, match="No space left"):
        write_atomically(path, b"new", fault=disk_full)
    assert path.read_bytes() == b"old" and [p.name for p in tmp_path.iterdir()] == ["a.bin"]


def test_an_exception_inside_the_block_keeps_the_old_file(tmp_path):
    path = tmp_path / "a.bin"
    path.write_bytes(b"old")
    with pytest.raises(RuntimeError):
        with atomic_output(path) as out:
            out.write(b"half")
            raise RuntimeError("writer failed")
    assert path.read_bytes() == b"old" and [p.name for p in tmp_path.iterdir()] == ["a.bin"]


def test_a_symlink_is_refused_and_its_target_untouched(tmp_path):
    target = tmp_path / "precious.txt"
    target.write_bytes(b"keep me")
    link = tmp_path / "config.toml"
    link.symlink_to(target)
    with pytest.raises(OSError) as caught:
        write_atomically(link, b"overwritten")
    assert caught.value.errno == errno.ELOOP and "symbolic link" in str(caught.value)
    assert target.read_bytes() == b"keep me" and link.is_symlink()
