"""scripts/bench_vocabulary.py runs end to end on a tiny setting (speed itself is never asserted in tests)."""

import json
import subprocess
import sys
from pathlib import Path

from demo_slices import write_demo_slices

SCRIPT = Path(__file__).resolve().parents[1] / "scripts" / "bench_vocabulary.py"


def test_bench_vocabulary_runs_tiny_and_reports_every_figure(tmp_path):
    write_demo_slices(tmp_path, 30)
    done = subprocess.run([sys.executable, str(SCRIPT), "--rows", "300", "2000", "--repeats", "1", "--epochs", "1", "--dim", "4",
                           "--train-file", str(tmp_path / "train.trees"), "--json"],
                          capture_output=True, text=True, check=True)
    report = json.loads(done.stdout)
    small, large = report["table"]
    assert report["trees"] == 30 and report["dim"] == 4
    assert small["rows"] == 301 and large["rows"] == 2001  # the unknown word plus the file's first rows
    assert small["ratio"] == 1.0 and large["ratio"] > 0
    for row in report["table"]:
        assert row["epoch_seconds"] > 0 and row["peak_rss_mb"] > 0 and row["save_seconds"] > 0
