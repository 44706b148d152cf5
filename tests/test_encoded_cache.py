"""The on-disk cache of encoded treebanks: round trip, keys, damage, stale entries, and a resume that uses it."""

from __future__ import annotations

import shutil

import numpy as np
import pytest

from demo_slices import write_demo_slices
from rntn_engine.cli.app import main
from rntn_engine.data.batches import encode_treebank
from rntn_engine.data.encoded_cache import cache_key, load_cached_bank, store_cached_bank
from rntn_engine.data.treebank_reader import read_trees
from rntn_engine.data.vocabulary import build_vocabulary
from rntn_engine.run import trainer
from rntn_engine.run.checkpoints import load_checkpoint

COLUMNS = ("word", "left", "right", "label", "start")


@pytest.fixture
def bank_and_vocabulary(tmp_path):
    train, _ = write_demo_slices(tmp_path, 60)
    trees = read_trees(train, num_classes=5)
    vocabulary = build_vocabulary(trees, 1)
    return encode_treebank(trees, vocabulary), vocabulary


def _same(a, b):
    for name in COLUMNS:
        x, y = getattr(a, name), getattr(b, name)
        assert x.dtype == y.dtype and np.array_equal(x, y), name


def test_an_entry_reads_back_as_the_same_read_only_bank(tmp_path, bank_and_vocabulary):
    bank, vocabulary = bank_and_vocabulary
    key = cache_key("ab" * 32, "right", 5, vocabulary)
    store_cached_bank(tmp_path / "cache", "train", key, bank)
    loaded = load_cached_bank(tmp_path / "cache", "train", key)
    _same(loaded, bank)
    assert not loaded.word.flags.writeable
    assert load_cached_bank(tmp_path / "cache", "dev", key) is None  # another name
    assert load_cached_bank(tmp_path / "cache", "train", cache_key("cd" * 32, "right", 5, vocabulary)) is None


def test_the_key_changes_with_every_part(bank_and_vocabulary):
    _, vocabulary = bank_and_vocabulary
    base = cache_key("ab" * 32, "right", 5, vocabulary)
    others = [
        cache_key("ac" * 32, "right", 5, vocabulary),
        cache_key("ab" * 32, "left", 5, vocabulary),
        cache_key("ab" * 32, "right", 3, vocabulary),
        cache_key("ab" * 32, "right", None, vocabulary),
        cache_key("ab" * 32, "right", 5, vocabulary.extended(["zzz-new"])),
        cache_key("ab" * 32, "right", 5, type(vocabulary)(vocabulary.words, True, vocabulary.min_count)),
    ]
    assert len({base, *others}) == len(others) + 1


@pytest.mark.parametrize("damage", ["flip a byte", "cut a file", "remove a file", "edit the manifest"])
def test_a_damaged_entry_is_refused_and_removed(tmp_path, bank_and_vocabulary, damage):
    bank, vocabulary = bank_and_vocabulary
    key = cache_key("ab" * 32, "right", 5, vocabulary)
    cache = tmp_path / "cache"
    store_cached_bank(cache, "train", key, bank)
    (entry,) = cache.iterdir()
    word = entry / "word.npy"
    if damage == "flip a byte":
        raw = bytearray(word.read_bytes())
        raw[-3] ^= 0x01
        word.write_bytes(bytes(raw))
    elif damage == "cut a file":
        word.write_bytes(word.read_bytes()[:-8])
    elif damage == "remove a file":
        (entry / "label.npy").unlink()
    else:
        manifest = entry / "manifest.json"
        manifest.write_text(manifest.read_text().replace('"nodes": ', '"nodes": 1'), encoding="utf-8")
    assert load_cached_bank(cache, "train", key) is None
    assert not entry.exists()


def test_writing_an_entry_removes_stale_ones_and_leftovers_but_not_other_names(tmp_path, bank_and_vocabulary):
    bank, vocabulary = bank_and_vocabulary
    cache = tmp_path / "cache"
    old, new = cache_key("ab" * 32, "right", 5, vocabulary), cache_key("cd" * 32, "right", 5, vocabulary)
    store_cached_bank(cache, "train", old, bank)
    store_cached_bank(cache, "dev", old, bank)
    leftover = cache / f".train-{new[:32]}.999999.rntn-tmp"
    leftover.mkdir()
    unrelated = cache / "notes.txt"
    unrelated.write_text("mine", encoding="utf-8")
    store_cached_bank(cache, "train", new, bank)
    names = sorted(p.name for p in cache.iterdir())
    assert names == sorted([f"dev-{old[:32]}", f"train-{new[:32]}", "notes.txt"])


def _train_args(tb, run_dir, epochs):
    return ["train", "--train-file", str(tb / "train.trees"), "--dev-file", str(tb / "dev.trees"), "--dim", "4",
            "--epochs", str(epochs), "--batch-size", "10", "--run-dir", str(run_dir), "--no-progress"]


def test_a_resume_loads_the_cached_treebanks_and_continues_as_without_them(tmp_path, monkeypatch, capsys):
    monkeypatch.setattr(trainer, "TREEBANK_CACHE_MIN_BYTES", 0)
    tb = tmp_path / "data"
    tb.mkdir()
    write_demo_slices(tb, 80, 20)
    run_dir = tmp_path / "run"
    assert main(_train_args(tb, run_dir, 1)) == 0
    cache = run_dir / trainer.TREEBANK_CACHE_DIR
    assert sorted(p.name.split("-")[0] for p in cache.iterdir()) == ["dev", "train"]
    plain = tmp_path / "run-without-cache"
    shutil.copytree(run_dir, plain)
    shutil.rmtree(plain / trainer.TREEBANK_CACHE_DIR)

    def refuse(*args, **kwargs):
        raise AssertionError("the treebank text was read again")

    with monkeypatch.context() as patch:
        patch.setattr(trainer, "read_encoded_treebank", refuse)
        assert main(["resume", str(run_dir), "--epochs", "2", "--no-progress"]) == 0
    assert main(["resume", str(plain), "--epochs", "2", "--no-progress"]) == 0  # reads the text, writes the cache
    a, b = load_checkpoint(run_dir / "model.h5"), load_checkpoint(plain / "model.h5")
    assert np.array_equal(a.params.flat, b.params.flat)
    assert sorted(p.name for p in cache.iterdir()) == sorted(p.name for p in (plain / trainer.TREEBANK_CACHE_DIR).iterdir())


def test_changed_data_gets_a_new_entry_and_the_stale_one_goes(tmp_path, monkeypatch, capsys):
    monkeypatch.setattr(trainer, "TREEBANK_CACHE_MIN_BYTES", 0)
    tb = tmp_path / "data"
    tb.mkdir()
    write_demo_slices(tb, 80, 20)
    run_dir = tmp_path / "run"
    assert main(_train_args(tb, run_dir, 1)) == 0
    cache = run_dir / trainer.TREEBANK_CACHE_DIR
    before = {p.name for p in cache.iterdir()}
    (tb / "train.trees").write_text((tb / "train.trees").read_text(encoding="utf-8") + "(3 (2 new) (3 tree))\n",
                                    encoding="utf-8")
    assert main(["resume", str(run_dir), "--epochs", "2", "--allow-changed-data", "--no-progress"]) == 0
    after = {p.name for p in cache.iterdir()}
    train_before = {n for n in before if n.startswith("train-")}
    train_after = {n for n in after if n.startswith("train-")}
    assert len(train_after) == 1 and train_after != train_before  # a new key; the stale entry removed
    assert {n for n in after if n.startswith("dev-")} == {n for n in before if n.startswith("dev-")}


def test_small_treebanks_are_not_cached(tmp_path, capsys):
    tb = tmp_path / "data"
    tb.mkdir()
    write_demo_slices(tb, 80, 20)
    run_dir = tmp_path / "run"
    assert main(_train_args(tb, run_dir, 1)) == 0
    assert not (run_dir / trainer.TREEBANK_CACHE_DIR).exists()
