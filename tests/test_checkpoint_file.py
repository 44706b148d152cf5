"""HDF5 checkpoint files: round trip, self-description, damage detection, atomic replacement."""

import errno
import os

import h5py
import numpy as np
import pytest

from rntn_engine.data.atomic_files import is_our_temp_file
from rntn_engine.data.checkpoint_file import (
    CheckpointContent,
    CheckpointError,
    CheckpointUnavailableError,
    read_checkpoint,
    write_checkpoint,
)


def sample_content(value=1.0):
    c = CheckpointContent()
    c.arrays["parameters/composition_matrix"] = np.full((3, 6), value, dtype=np.float32)
    c.arrays["parameters/composition_bias"] = np.arange(3, dtype=np.float64)
    c.words["vocabulary"] = ["<unknown>", "fern", "glasshouse", "café"]
    c.records["state"] = {"step": 12, "epoch": 1, "rng": str(2**100)}
    c.descriptions["arrays/parameters/composition_matrix"] = "composition matrix"
    return c


def test_round_trip_keeps_everything(tmp_path):
    path = tmp_path / "a.h5"
    write_checkpoint(path, sample_content())
    back = read_checkpoint(path)
    assert np.array_equal(back.arrays["parameters/composition_matrix"], sample_content().arrays["parameters/composition_matrix"])
    assert back.arrays["parameters/composition_matrix"].dtype == np.float32
    assert back.words["vocabulary"] == ["<unknown>", "fern", "glasshouse", "café"]
    assert back.records["state"] == {"step": 12, "epoch": 1, "rng": str(2**100)}
    assert back.descriptions["arrays/parameters/composition_matrix"] == "composition matrix"
    assert not [p for p in tmp_path.iterdir() if is_our_temp_file(p)]


def test_plain_h5py_reads_it_and_sees_checksums(tmp_path):
    # External reader: plain h5py, no code of ours.
    path = tmp_path / "a.h5"
    write_checkpoint(path, sample_content())
    with h5py.File(path, "r") as f:
        assert f.attrs["format"] == "rntn_engine checkpoint"
        assert len(f["arrays/parameters/composition_matrix"].attrs["sha256"]) == 64
        assert f["words/vocabulary"].asstr()[2] == "glasshouse"


def test_flipped_byte_inside_a_dataset_is_detected(tmp_path):
    path = tmp_path / "a.h5"
    write_checkpoint(path, sample_content())
    with h5py.File(path, "r") as f:
        offset = f["arrays/parameters/composition_matrix"].id.get_offset()
    data = bytearray(path.read_bytes())
    data[offset + 5] ^= 0xFF
    path.write_bytes(bytes(data))
    with pytest.raises(CheckpointError, match=r"checksum mismatch in dataset /arrays/parameters/composition_matrix"):
        read_checkpoint(path)


@pytest.mark.parametrize("cut", ["zero", "96", "half", "minus_one"])
def test_truncated_file_is_detected(tmp_path, cut):
    path = tmp_path / "a.h5"
    write_checkpoint(path, sample_content())
    size = path.stat().st_size
    keep = {"zero": 0, "96": 96, "half": size // 2, "minus_one": size - 1}[cut]
    with open(path, "r+b") as fh:
        fh.truncate(keep)
    with pytest.raises(CheckpointError) as info:
        read_checkpoint(path)
    assert str(path) in str(info.value)


@pytest.mark.parametrize("point", ["before_open", "mid_write", "before_fsync", "before_rename"])
def test_failed_write_leaves_previous_file_untouched(tmp_path, point):
    path = tmp_path / "a.h5"
    write_checkpoint(path, sample_content(1.0))
    before = path.read_bytes()

    def disk_full(where):
        if where == point:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    with pytest.raises(OSError):
        write_checkpoint(path, sample_content(2.0), fault=disk_full)
    assert path.read_bytes() == before
    assert read_checkpoint(path).arrays["parameters/composition_matrix"][0, 0] == 1.0
    assert not [p for p in tmp_path.iterdir() if is_our_temp_file(p)]


def test_not_a_checkpoint(tmp_path):
    path = tmp_path / "x.h5"
    path.write_text("(3 (2 moss) (4 fern))\n")
    with pytest.raises(CheckpointError, match="not a readable HDF5 checkpoint"):
        read_checkpoint(path)
    with pytest.raises(CheckpointUnavailableError, match="no such checkpoint file"):
        read_checkpoint(tmp_path / "missing.h5")


def test_a_real_checkpoint_names_every_dataset_descriptively(tmp_path):
    # the layout README documents: descriptive dataset names, each with a description naming its symbol
    from random_trees import engine_case

    from rntn_engine.model.parameters import PARAMETERS
    from rntn_engine.run.checkpoints import save_checkpoint
    from rntn_engine.run.run_config import TrainConfig

    params, _, _, _, vocabulary = engine_case("mvrnn", dim=3)
    config = TrainConfig(model="mvrnn", dim=3, dtype="float64")
    path = tmp_path / "m.h5"
    save_checkpoint(path, params, vocabulary, config, params.zeros_like(), {}, [], {})
    names = []
    with h5py.File(path, "r") as f:
        f.visititems(lambda name, obj: names.append((name, obj.attrs.get("description", ""))) if
                     isinstance(obj, h5py.Dataset) else None)
    arrays = {n: d for n, d in names if n.startswith("arrays/")}
    expected = {f"arrays/{group}/{PARAMETERS[s].stored_as}" for s in params.names()
                for group in ("parameters", "adagrad_sums")}
    assert set(arrays) == expected
    assert "arrays/parameters/word_vectors" in arrays and "arrays/parameters/classifier_weights" in arrays
    for name, description in names:
        assert len(name.rsplit("/", 1)[1]) > 2 and description, name  # no single-letter names; all described
    assert "composition matrix W" in arrays["arrays/parameters/composition_matrix"]


def test_a_file_of_an_older_format_version_gets_one_line(tmp_path):
    path = tmp_path / "old.h5"
    old = sample_content()
    old.format_version = 1
    write_checkpoint(path, old)
    with pytest.raises(CheckpointError) as caught:
        read_checkpoint(path)
    message = str(caught.value)
    assert "format version 1" in message and "reads version 2" in message and "\n" not in message
