"""`rntn train` end to end on small slices of the demo treebank, through the CLI entry point."""

from pathlib import Path

import numpy as np
import pytest

from demo_slices import write_demo_slices
from rntn_engine.cli.app import main
from rntn_engine.run.checkpoints import load_checkpoint
from rntn_engine.run.run_config import TrainConfig
from rntn_engine.run.run_directory import list_checkpoints

DEMO = Path(__file__).resolve().parents[1] / "data_demo"


@pytest.fixture
def small_treebanks(tmp_path):
    return write_demo_slices(tmp_path, 150, 50)


def test_train_writes_model_config_and_metrics(small_treebanks, tmp_path, capsys):
    train, dev = small_treebanks
    run_dir = tmp_path / "run"
    code = main(["train", "--train-file", str(train), "--dev-file", str(dev), "--model", "rntn", "--dim", "6",
                 "--epochs", "2", "--run-dir", str(run_dir), "--no-progress"])
    out = capsys.readouterr().out
    assert code == 0
    assert "epoch   2" in out and "dev fine all-nodes" in out and "baseline" in out
    assert len((run_dir / "metrics.jsonl").read_text().splitlines()) == 2
    ckpt = load_checkpoint(run_dir / "model.h5")
    assert ckpt.config.dim == 6 and ckpt.config.model == "rntn"
    assert ckpt.params.V.shape == (6, 12, 12)
    last = load_checkpoint(list_checkpoints(run_dir)[-1].path)
    assert last.state["step"] == 2 * -(-150 // TrainConfig().batch_size) and last.state["finished"]
    assert ckpt.state["step"] == load_checkpoint(run_dir / "best.h5").state["step"]  # model.h5: the best


def test_same_settings_give_bit_identical_models_whatever_the_threads(small_treebanks, tmp_path):
    train, _ = small_treebanks
    flats = []
    for threads in ("1", "2"):
        run_dir = tmp_path / f"run{threads}"
        assert main(["train", "--train-file", str(train), "--dim", "5", "--epochs", "2", "--threads", threads,
                     "--run-dir", str(run_dir), "--no-progress"]) == 0
        flats.append(load_checkpoint(run_dir / "model.h5").params.flat)
    assert np.array_equal(flats[0], flats[1])


def test_config_file_and_flag_precedence(tmp_path, capsys):
    cfg = tmp_path / "run.toml"
    cfg.write_text('[train]\nmodel = "rnn"\ndim = 7\nepochs = 3\n', encoding="utf-8")
    assert main(["train", "--config", str(cfg), "--dim", "9", "--print-config"]) == 0
    out = capsys.readouterr().out
    assert 'model = "rnn"' in out and "dim = 9" in out and "epochs = 3" in out


@pytest.mark.parametrize("text,needle", [
    ("[train]\ndimension = 3\n", "unknown setting 'dimension'"),
    ("[train]\ndim = 'big'\n", "setting 'dim' expects int"),
    ("[train\n", "not valid TOML"),
])
def test_bad_config_file_is_a_usage_error(tmp_path, capsys, text, needle):
    cfg = tmp_path / "bad.toml"
    cfg.write_text(text, encoding="utf-8")
    assert main(["train", "--config", str(cfg), "--print-config"]) == 2
    err = capsys.readouterr().err
    assert needle in err and len(err.strip().splitlines()) == 1


def test_bad_option_values_exit_2(capsys):
    assert main(["train", "--train-file", "x.trees", "--model", "lstm"]) == 2
    assert "--model must be one of rnn, rntn" in capsys.readouterr().err
    assert main(["train", "--epochs", "many"]) == 2


def test_malformed_treebank_names_file_line_column(tmp_path, capsys):
    bad = tmp_path / "bad.trees"
    bad.write_text("(3 (2 moss) (4 fern))\n(3 (2 moss) (4 fern)\n", encoding="utf-8")
    assert main(["train", "--train-file", str(bad), "--run-dir", str(tmp_path / "r"), "--no-progress"]) == 1
    err = capsys.readouterr().err.strip()
    assert err.startswith(f"{bad}:2:") and len(err.splitlines()) == 1


def test_diverging_loss_stops_with_a_clear_error(small_treebanks, tmp_path, capsys):
    train, _ = small_treebanks
    code = main(["train", "--train-file", str(train), "--dim", "4", "--epochs", "3", "--lr", "1e30",
                 "--run-dir", str(tmp_path / "r"), "--no-progress"])
    err = capsys.readouterr().err
    assert code == 1 and "Lower --lr" in err and "last good checkpoint is untouched" in err
    assert load_checkpoint(tmp_path / "r" / "checkpoint-step000000000.h5").state["step"] == 0


def test_rntn_beats_the_majority_baseline_on_the_demo_treebank(tmp_path, capsys):
    # The README's demo claim, on fewer epochs: a composition model far above the majority class at the root.
    code = main(["train", "--train-file", str(DEMO / "garden_train.trees"), "--dev-file",
                 str(DEMO / "garden_dev.trees"), "--epochs", "4", "--run-dir", str(tmp_path / "r"), "--no-progress"])
    assert code == 0
    history = load_checkpoint(tmp_path / "r" / "model.h5").metrics
    assert history[-1]["dev_fine_root"] > 0.2725 + 0.25  # majority-class root baseline of the demo dev set


def test_mvrnn_trains_resumes_and_predicts_through_the_same_commands(small_treebanks, tmp_path, capsys):
    train, dev = small_treebanks
    run_dir = tmp_path / "mv"
    args = ["train", "--train-file", str(train), "--dev-file", str(dev), "--model", "mvrnn", "--dim", "5",
            "--epochs", "2", "--run-dir", str(run_dir), "--no-progress"]
    assert main([*args, "--time-limit", "0.001s"]) == 75
    assert main(["resume", str(run_dir), "--time-limit", "0", "--no-progress"]) == 0
    straight = tmp_path / "mv-straight"
    assert main([*args[:-3], "--run-dir", str(straight), "--no-progress"]) == 0
    a, b = load_checkpoint(run_dir / "model.h5"), load_checkpoint(straight / "model.h5")
    assert a.params.LM.shape == (len(a.vocabulary), 5, 5)
    assert np.array_equal(a.params.flat, b.params.flat) and np.array_equal(a.adagrad_sums.flat, b.adagrad_sums.flat)
    capsys.readouterr()
    assert main(["evaluate", str(run_dir), "-t", str(dev), "--json", "--no-progress", "-j", "1"]) == 0
    assert main(["predict", str(run_dir / "model.h5"), str(dev), "-o", str(tmp_path / "p.trees")]) == 0


def test_memory_guard_refuses_before_allocating(small_treebanks, tmp_path, capsys):
    train, _ = small_treebanks
    code = main(["train", "--train-file", str(train), "--model", "mvrnn", "--dim", "200", "--max-memory-gb", "0.01",
                 "--run-dir", str(tmp_path / "big"), "--no-progress"])
    err = capsys.readouterr().err.strip()
    assert code == 1 and len(err.splitlines()) == 1
    assert "raise --min-count" in err and "lower --dim" in err and "--max-memory-gb" in err
    assert not list((tmp_path / "big").glob("checkpoint-*"))
