"""scripts/bench.py runs end to end on a tiny setting (speed itself is never asserted in tests)."""

import importlib.util
import json
from pathlib import Path

SCRIPT = Path(__file__).resolve().parents[1] / "scripts" / "bench.py"


def load_bench():
    spec = importlib.util.spec_from_file_location("rntn_bench", SCRIPT)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_bench_runs_tiny_and_reports_every_figure(capsys):
    bench = load_bench()
    result = bench.main(["--trees", "60", "--vocab", "50", "--dims", "4", "--dtypes", "float64", "--threads", "1",
                         "--steps", "2", "--repeats", "1", "--matmul-size", "32", "--json", "--skip-process-probes"])
    printed = json.loads(capsys.readouterr().out)
    assert printed["corpus"]["trees"] == 60 == result["corpus"]["trees"]
    (setting,) = printed["settings"]
    for key in ("train_internal_nodes_per_s", "train_trees_per_s", "train_seconds_per_epoch", "forward_trees_per_s",
                "effective_gflops", "matmul_gflops", "ratio_to_matmul", "train_cpu_per_wall", "speedup_vs_1_thread"):
        assert setting[key] > 0, key
    assert printed["once"]["checkpoint_save_seconds"] > 0 and printed["once"]["checkpoint_load_seconds"] > 0


def test_synthetic_treebank_has_the_documented_shape(tmp_path):
    bench = load_bench()
    path = tmp_path / "s.trees"
    bench.synthetic_treebank(path, 400, 1000, seed=0)
    from rntn_engine.data.treebank_reader import read_trees

    trees = read_trees(path, num_classes=5, binarise="strict")
    lengths = [len(t.words) for t in trees]
    assert len(trees) == 400 and min(lengths) >= 2 and max(lengths) <= 60
    assert 16 <= sum(lengths) / len(lengths) <= 22  # about 19 words on average
    assert all((t.label >= 0).all() for t in trees)  # every node labelled


def test_treebank_bench_runs_tiny_and_reports_every_figure(tmp_path, capsys):
    spec = importlib.util.spec_from_file_location("rntn_bench_treebank", SCRIPT.with_name("bench_treebank.py"))
    bench = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(bench)
    result = bench.main(["--trees", "300", "--vocab", "200", "--corpus-dir", str(tmp_path), "--repeats", "1",
                         "--exact-mb", "0.02", "--dim", "4", "--train-seconds", "0.2", "--json"])
    printed = json.loads(capsys.readouterr().out)
    (size,) = printed["sizes"]
    assert size["trees"] == 300 == result["sizes"][0]["trees"]
    for key in ("read_for_training_mb_per_s", "iter_trees_mb_per_s", "exact_reader_mb_per_s", "bank_bytes_per_node"):
        assert size[key] > 0, key
    for command in ("train", "resume", "resume_reading_text"):
        assert size[command]["first_step_seconds"] > 0 and size[command]["peak_rss_bytes"] > 0, command
        assert size[command]["exit_code"] == 75, command  # stopped by SIGTERM with a checkpoint
    assert size["evaluate"]["trees_per_second"] > 0 and size["evaluate"]["exit_code"] == 0
    lengths = [line.count("(") for line in (tmp_path / "synthetic-300-v200.trees").read_text().splitlines()]
    assert len(lengths) == 300 and 2 * 16 - 1 <= sum(lengths) / 300 <= 2 * 22 - 1  # about 19 words a tree


def test_bench_measures_a_baseline_tree_setting_by_setting(capsys):
    """--baseline-tree: the same settings measured on another checkout (here this one) and the ratios printed."""
    bench = load_bench()
    tree = SCRIPT.parents[1]
    result = bench.main(["--trees", "40", "--vocab", "50", "--dims", "4", "--dtypes", "float64", "--threads", "1",
                         "--steps", "2", "--repeats", "1", "--matmul-size", "32", "--skip-process-probes",
                         "--own-kernel-rows", "3", "--baseline-tree", str(tree)])
    (setting,) = result["settings"]
    assert setting["baseline"]["train_seconds_per_epoch"] > 0 and setting["baseline"]["forward_trees_per_s"] > 0
    assert setting["epoch_new_over_old"] > 0 and setting["eval_new_over_old"] > 0
    assert "epoch new/old" in capsys.readouterr().out


def test_tensor_term_bench_runs_tiny(capsys):
    spec = importlib.util.spec_from_file_location("rntn_bench_tt", SCRIPT.parent / "bench_tensor_term.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    module.main(["widths", "levels", "--dims", "3", "--dtypes", "float64", "--rounds", "1", "--chunks", "6",
                 "--trees", "30"])
    out = capsys.readouterr().out
    assert "d=3 float64" in out and "level / node" in out


def test_vector_math_bench_runs_tiny(capsys):
    spec = importlib.util.spec_from_file_location("rntn_bench_vm", SCRIPT.parent / "bench_vector_math.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    rows = module.main(["--lengths", "7", "--rounds", "1"])
    assert [(r["dtype"], r["length"]) for r in rows] == [("float32", 7), ("float64", 7)]
    assert all(r[k] > 0 for r in rows for k in ("tanh_own", "tanh_library", "exp_own", "exp_library"))
    assert "tanh own" in capsys.readouterr().out
