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
