"""Train with and without class weights and compare macro-F1 and per-class recall on a test treebank.

    python scripts/compare_class_weights.py [--seeds 0 1 2] [--work-dir DIR] [-- extra `rntn train` options]

Each setting of --weights (default: none and balanced) is trained once per seed with the default
settings otherwise (`rntn train --class-weights W --seed S`, model.h5 = the best checkpoint by the
default --best-metric), then the model is scored on --test-file with `rntn evaluate --detail`.
Prints one row per run and the mean per setting as a Markdown table (README "Class weights").
"""

from __future__ import annotations

import argparse
import contextlib
import io
import json
import platform
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from rntn_engine.cli.app import main as rntn  # noqa: E402


def run_quietly(argv: list[str]) -> str:
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        code = rntn(argv)
    if code != 0:
        raise SystemExit(f"rntn {' '.join(argv)} exited {code}:\n{out.getvalue()}")
    return out.getvalue()


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--train-file", default=str(ROOT / "data_demo/garden_train.trees"))
    parser.add_argument("--dev-file", default=str(ROOT / "data_demo/garden_dev.trees"))
    parser.add_argument("--test-file", default=str(ROOT / "data_demo/garden_test.trees"))
    parser.add_argument("--weights", nargs="+", default=["none", "balanced"])
    parser.add_argument("--seeds", nargs="+", type=int, default=[0, 1, 2])
    parser.add_argument("--work-dir", default="")
    parser.add_argument("extra", nargs="*", help="more `rntn train` options, after --")
    args = parser.parse_args()
    work = Path(args.work_dir or tempfile.mkdtemp(prefix="class-weights-"))
    started = time.time()
    results = []
    for weights in args.weights:
        for seed in args.seeds:
            run_dir = work / f"{weights.replace(',', '_')}-seed{seed}"
            if not (run_dir / "model.h5").exists():
                run_quietly(["train", "--train-file", args.train_file, "--dev-file", args.dev_file, "--seed", str(seed),
                             "--class-weights", weights, "--run-dir", str(run_dir), "--no-progress", *args.extra])
            report = json.loads(run_quietly(["evaluate", str(run_dir / "model.h5"), "-t", args.test_file, "--detail",
                                             "--json", "--no-progress"]))
            results.append((weights, seed, report))
    names = results[0][2]["class_names"]
    print(f"# {time.strftime('%Y-%m-%d')}, {platform.node()}, Python {platform.python_version()}, "
          f"{time.time() - started:.0f} s; runs in {work}")
    print(f"# python scripts/compare_class_weights.py --seeds {' '.join(map(str, args.seeds))} "
          f"--weights {' '.join(args.weights)}; scored on {args.test_file}")
    header = ["class weights", "seed", "macro-F1 all", "macro-F1 roots", "fine all", "fine roots",
              *(f"recall {n} (all)" for n in names)]
    print("| " + " | ".join(header) + " |")
    print("|" + "---|" * len(header))

    def cells(reports):
        s = [r["scores"] for r in reports]
        recall = np.mean([r["all_nodes"]["per_class"]["recall"] for r in reports], axis=0)
        return [f"{np.mean([x['macro_f1_all'] for x in s]):.3f}", f"{np.mean([x['macro_f1_root'] for x in s]):.3f}",
                f"{np.mean([x['fine_all'] for x in s]):.3f}", f"{np.mean([x['fine_root'] for x in s]):.3f}",
                *(f"{v:.3f}" for v in recall)]

    for weights, seed, report in results:
        print("| " + " | ".join([weights, str(seed), *cells([report])]) + " |")
    for weights in args.weights:
        mine = [r for w, _, r in results if w == weights]
        print("| " + " | ".join([f"**{weights}**", "mean", *cells(mine)]) + " |")
    return 0


if __name__ == "__main__":
    sys.exit(main())
