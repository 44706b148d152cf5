"""scripts/scaling_model.py's arithmetic (worked by hand), and scripts/bench_mpi.py end to end on a tiny setting.

Speed is never asserted: the benchmark only has to run and report every figure the model needs.
"""

import importlib.util
import json
import math
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

SCRIPTS = Path(__file__).resolve().parents[1] / "scripts"


def load(name):
    spec = importlib.util.spec_from_file_location(f"rntn_{name}", SCRIPTS / f"{name}.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module  # dataclasses look their module up there
    spec.loader.exec_module(module)
    return module


model = load("scaling_model")
COSTS = model.StepCosts(per_tree_s=1e-3, reduce_chunk_s=0.1e-3, adagrad_step_s=0.5e-3, message_bytes=1e6,
                        unpack_chunk_s=0.2e-3, pack_chunk_s=0.3e-3)
NET = model.Network("test", bandwidth_bytes_per_s=1e9, latency_s=0.0)  # 1 ms per message of 1 MB


def test_seconds_and_efficiency_match_the_hand_computed_example():
    # 4 ranks, 100 trees: own chunk 25 ms; 3 messages of 1 ms; unpack 3 x 0.2 + pack 0.3 = 0.9 ms;
    # reduction 4 x 0.1 = 0.4 ms; AdaGrad 0.5 ms: 29.8 ms. One rank, 4 chunks: 100 + 0.4 + 0.5 = 100.9 ms.
    assert model.seconds_per_step(4, 100, COSTS, NET) == pytest.approx(29.8e-3, rel=1e-12)
    assert model.one_rank_seconds(4, 100, COSTS) == pytest.approx(100.9e-3, rel=1e-12)
    assert model.efficiency(4, 100, COSTS, NET) == pytest.approx(100.9 / (4 * 29.8), rel=1e-12)
    assert model.efficiency(1, 100, COSTS, NET) == pytest.approx(1.0, rel=1e-12)  # one rank: no exchange


def test_smallest_batch_is_the_first_that_reaches_the_target():
    # by hand: X = 3 + 0.9 + 0.4 + 0.5 = 4.8 ms; B >= (0.7 * 4 * 4.8 - 0.4 - 0.5) / (1 * 0.3) = 41.8 -> 42
    assert model.smallest_batch(4, 0.7, COSTS, NET) == 42
    for n in (2, 8, 32, 128):
        b = model.smallest_batch(n, 0.7, COSTS, NET)
        assert model.efficiency(n, b, COSTS, NET) >= 0.7 - 1e-12
        assert b == n or model.efficiency(n, b - 1, COSTS, NET) < 0.7
    free = model.StepCosts(1e-3, 0.0, 0.0, 0.0, 0.0, 0.0)  # nothing but compute: any batch of N trees will do
    assert model.smallest_batch(16, 0.7, free, NET) == 16


@pytest.mark.skipif(shutil.which("mpiexec") is None, reason="needs mpiexec (the [mpi] extra)")
def test_bench_mpi_runs_tiny_and_reports_what_the_model_needs(tmp_path):
    pytest.importorskip("mpi4py")
    done = subprocess.run([sys.executable, str(SCRIPTS / "bench_mpi.py"), "--trees", "40", "--batch-sizes", "4",
                           "--dim", "4", "--steps", "3", "--passes", "1", "--rounds", "1", "--json"],
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    result = json.loads(done.stdout)
    (one, two) = result["summary"]["rows"]
    assert (one["ranks"], two["ranks"]) == (1, 2) and one["communication"] == 0 < two["communication"]
    assert two["speed_up"] > 0 and all(math.isfinite(v) for v in (two["compute"], two["idle"]))
    (path := tmp_path / "bench.json").write_text(done.stdout)
    costs = model.costs_from_bench(str(path))
    assert costs.message_bytes > 0 and costs.per_tree_s > 0 and costs.unpack_chunk_s > 0
