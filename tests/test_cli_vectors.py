"""Training from pretrained vectors and exporting trained ones, through the command line."""

from pathlib import Path

import numpy as np
import pytest
from gensim.models import KeyedVectors

from demo_slices import write_demo_slices
from rntn_engine.cli.app import main
from rntn_engine.data.word_vectors import load_vectors_for
from rntn_engine.run.checkpoints import load_checkpoint

DEMO = Path(__file__).resolve().parents[1] / "data_demo"
VECTORS = DEMO / "garden_vectors_25d.glove.txt"


@pytest.fixture
def small(tmp_path):
    write_demo_slices(tmp_path, 100)
    return tmp_path


def args(tmp, run_dir, *extra):
    return ["train", "--train-file", str(tmp / "train.trees"), "--vectors", str(VECTORS), "--run-dir", str(run_dir),
            "--no-progress", "--batch-size", "10", *extra]


def file_vectors():
    return {line.split(" ")[0]: np.array(line.split(" ")[1:], dtype=np.float32)
            for line in VECTORS.read_text(encoding="utf-8").splitlines()}


def test_initial_word_vectors_come_from_the_file_and_coverage_is_reported(small, tmp_path, capsys):
    run_dir = tmp_path / "run"
    assert main(args(small, run_dir, "--epochs", "0")) == 0
    out = capsys.readouterr().out
    assert "pretrained vectors:" in out and "training word types:" in out and "training tokens:" in out
    assert "found exactly" in out and "not found" in out
    model = load_checkpoint(run_dir / "model.h5")
    assert model.config.dim == 25  # taken from the file
    reference = file_vectors()
    for i, word in enumerate(model.vocabulary.words[1:], start=1):
        np.testing.assert_array_equal(model.params.L[i], reference[word])


def test_dim_clash_is_a_usage_error(small, tmp_path, capsys):
    assert main(args(small, tmp_path / "run", "--dim", "50", "--epochs", "0")) == 2
    err = capsys.readouterr().err
    assert "--dim 50 clashes with" in err and "25 values" in err


def test_frozen_vectors_do_not_move_and_others_do(small, tmp_path):
    run_dir = tmp_path / "run"
    assert main(args(small, run_dir, "--epochs", "1", "--freeze-vectors")) == 0
    model = load_checkpoint(run_dir / "model.h5")
    reference = file_vectors()
    for i, word in enumerate(model.vocabulary.words[1:], start=1):
        np.testing.assert_array_equal(model.params.L[i], reference[word])
    start = load_checkpoint(run_dir / "checkpoint-step000000000.h5")
    assert not np.array_equal(start.params.W, model.params.W)


def test_extend_vocabulary_adds_file_words_beyond_the_training_data(small, tmp_path, capsys):
    run_dir = tmp_path / "run"
    assert main(args(small, run_dir, "--epochs", "0", "--extend-vocabulary", "863")) == 0
    assert "vocabulary extended to" in capsys.readouterr().out
    model = load_checkpoint(run_dir / "model.h5")
    assert len(model.vocabulary) == 864  # every file word plus <unknown>
    baseline = tmp_path / "base"
    assert main(args(small, baseline, "--epochs", "0")) == 0
    base_vocab = load_checkpoint(baseline / "model.h5").vocabulary
    assert model.vocabulary.words[: len(base_vocab)] == base_vocab.words  # training ids unchanged


def test_resume_does_not_read_the_vector_file_again(small, tmp_path):
    vectors = tmp_path / "v.txt"
    vectors.write_bytes(VECTORS.read_bytes())
    run_dir = tmp_path / "run"
    assert main(["train", "--train-file", str(small / "train.trees"), "--vectors", str(vectors), "--epochs", "1",
                 "--batch-size", "10", "--run-dir", str(run_dir), "--no-progress", "--time-limit", "0.001s"]) == 75
    vectors.unlink()
    assert main(["resume", str(run_dir), "--time-limit", "0", "--no-progress"]) == 0


@pytest.mark.parametrize("binary", [False, True])
def test_export_then_import_gives_the_same_vectors(small, tmp_path, binary):
    run_dir = tmp_path / "run"
    assert main(args(small, run_dir, "--epochs", "1")) == 0
    out = tmp_path / ("vectors.bin" if binary else "vectors.txt")
    assert main(["export-vectors", str(run_dir / "model.h5"), str(out), *(["--binary"] if binary else [])]) == 0
    model = load_checkpoint(run_dir / "model.h5")
    ours = load_vectors_for(out, None)
    assert ours.words == model.vocabulary.words
    np.testing.assert_array_equal(ours.vectors, model.params.L.astype(np.float32))
    # gensim, an independent reader, sees the same file the same way
    theirs = KeyedVectors.load_word2vec_format(str(out), binary=binary)
    np.testing.assert_array_equal(theirs[model.vocabulary.words[5]], model.params.L[5])
