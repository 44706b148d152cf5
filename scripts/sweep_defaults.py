#!/usr/bin/env python3
"""Choose the default training settings from our own measurements on two treebanks.

Trains the RNTN (the default model) on the demo treebank (data_demo/) and on a second,
generated treebank of a different kind (scripts/make_sweep_treebank.py: random binary
shapes, invented Zipf vocabulary, operator words, label noise; written to a temporary
folder), and searches the settings one knob at a time (coordinate search):

  1. start from the base point BASE (the middle of each grid below, one common L2 strength);
  2. for each knob in turn -- dim, batch_size, lr, the common L2 scale (all four L2
     strengths multiplied together), then each L2 strength on its own -- train every value
     of its grid with the other knobs at their current choice, on both treebanks, for every
     seed, and keep the value the rule below picks;
  3. re-check dim, batch_size and lr (--recheck) at the final point, each over its chosen value
     and that value's neighbours in its grid (the L2 choices may have moved their best values);
  4. train every setting the re-checks tried with more seeds (--final-seeds) and pick among
     these finalists by the same rule: two seeds leave differences of about 0.01-0.02 in
     dev root accuracy within noise, and the finalists are where that matters most;
  5. score the chosen setting once on the test splits (test is never used to choose);
  6. a short MV-RNN sweep of l2_word_matrices at the chosen setting (demo treebank by default);
  7. the previous defaults, trained the same way, as a reference row.

Every run trains --epochs epochs (fixed) with dev scoring after each epoch; a run's score
is its best checkpoint's (the epoch with the highest dev fine-grained root accuracy, the
trainer's default --best-metric), with the all-node accuracy of that same epoch. Scores
are means over --seeds (--final-seeds from step 4 on).

The rule that picks a value of a knob:

  * per treebank, rank the values by mean dev root accuracy (1 = best; ties share the
    better rank); the best value has the lowest rank averaged over the treebanks (ties:
    the higher root accuracy averaged over the treebanks, then the higher all-node accuracy);
  * for dim and batch_size, and among the finalists (which differ in cost), take instead the cheapest
    value (fewest measured training seconds, summed over the treebanks) whose mean root
    accuracy is within the noise of the best one's on every treebank. The noise of a
    treebank is the standard error of a difference between two seed-means:
    sqrt(2 s^2 / seeds), s^2 the variance between seeds pooled over the stage's own runs.

Results are cached by setting, seed and data hash in --results (JSON lines), so an
interrupted sweep continues where it stopped and repeated settings are trained once.
Trainings run one after another, one thread each, in this process.

Usage:  python scripts/sweep_defaults.py [--epochs 20] [--seeds 0 1] [--out sweep.md] [--json]
"""

from __future__ import annotations

import argparse
import datetime
import hashlib
import importlib.util
import json
import math
import os
import platform
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from rntn_engine.run.checkpoint_evaluation import evaluate_checkpoint
from rntn_engine.run.run_directory import checkpoint_name
from rntn_engine.run.run_config import TrainConfig
from rntn_engine.run.trainer import start_training

ROOT = Path(__file__).resolve().parents[1]
DEMO_FILES = tuple(str(ROOT / "data_demo" / f"garden_{s}.trees") for s in ("train", "dev", "test"))
TREEBANK_SCRIPT = ROOT / "scripts" / "make_sweep_treebank.py"

# grids of our own; the base point is the middle of each (the upper middle of an even-sized grid)
DIMS = (16, 24, 32, 48)
BATCH_SIZES = (8, 16, 32, 64)
LRS = (0.005, 0.01, 0.02, 0.04, 0.08)
L2_BASE = 1e-4
L2_SCALE_MULTIPLIERS = (0.1, 0.3, 1.0, 3.0, 10.0)  # the common scale: every L2 strength times this
L2_GROUP_MULTIPLIERS = (0.1, 1 / 3, 1.0, 3.0, 10.0)  # then each L2 strength on its own, over the same two decades
L2_GROUPS = ("l2_words", "l2_compose", "l2_tensor", "l2_classifier")
MV_L2_WORD_MATRICES = (0.0, 1e-5, 1e-4, 1e-3, 1e-2)
BASE = {"dim": 32, "batch_size": 32, "lr": 0.02, **{g: L2_BASE for g in L2_GROUPS}}
COST_KNOBS = ("dim", "batch_size", "finalists")  # knobs that change the cost of a run: the cheaper value wins within noise
# the settings these measurements replaced, for the reference row
PREVIOUS_DEFAULTS = {"dim": 25, "batch_size": 27, "lr": 0.01, "l2_words": 1e-4, "l2_compose": 1e-3,
                     "l2_tensor": 1e-3, "l2_classifier": 1e-4}
KNOB_LABELS = {"dim": "d", "batch_size": "batch", "lr": "lr", "l2_scale": "L2 scale", "l2_words": "l2_words",
               "l2_compose": "l2_compose", "l2_tensor": "l2_tensor", "l2_classifier": "l2_classifier",
               "l2_word_matrices": "l2_word_matrices", "finalists": "setting"}


def tidy(x: float) -> float:
    """A float with 3 significant digits (0.1 * 3e-4 is 3e-05, not 3.0000000000000004e-05)."""
    return float(f"{x:.3g}")


def file_digest(paths) -> str:
    h = hashlib.sha256()
    for p in paths:
        h.update(Path(p).read_bytes())
    return h.hexdigest()[:16]


class Treebank:
    def __init__(self, name: str, train: str, dev: str, test: str):
        self.name, self.train, self.dev, self.test = name, train, dev, test
        self.digest = file_digest((train, dev))


def generate_sweep_treebank(out_dir: Path, sizes: tuple[int, int, int], seed: int) -> Treebank:
    spec = importlib.util.spec_from_file_location("make_sweep_treebank", TREEBANK_SCRIPT)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    train, dev, test = module.write_treebank(out_dir, seed, sizes, echo=lambda line: None)
    return Treebank("generated", str(train), str(dev), str(test))


# ---------------------------------------------------------------------------------------------
# runs
# ---------------------------------------------------------------------------------------------


def remove_run_dir(run_dir: Path) -> None:
    """Delete a run directory this script made (its files only; a run directory has no subfolders)."""
    if run_dir.exists():
        for f in sorted(run_dir.iterdir()):
            f.unlink()
        run_dir.rmdir()


class Sweep:
    """Trains settings on treebanks and seeds, with a cache of finished runs."""

    def __init__(self, treebanks: list[Treebank], seeds: list[int], epochs: int, runs_dir: Path, results: Path,
                 log=print):
        self.treebanks, self.seeds, self.epochs = treebanks, seeds, epochs
        self.runs_dir, self.results_path, self.log = runs_dir, results, log
        self.cache: dict[str, dict] = {}
        if results.exists():
            for line in results.read_text(encoding="utf-8").splitlines():
                if line.strip():
                    record = json.loads(line)
                    self.cache[record["key"]] = record
        self.trained = 0

    def key(self, bank: Treebank, setting: dict, seed: int, model: str) -> str:
        fields = {"data": bank.digest, "model": model, "seed": seed, "epochs": self.epochs,
                  **{k: setting[k] for k in sorted(setting)}}
        return json.dumps(fields, sort_keys=True)

    def run(self, bank: Treebank, setting: dict, seed: int, model: str = "rntn") -> dict:
        key = self.key(bank, setting, seed, model)
        if key in self.cache:
            return self.cache[key]
        name = hashlib.sha256(key.encode()).hexdigest()[:12]
        run_dir = self.runs_dir / f"{bank.name}-{model}-{name}"
        remove_run_dir(run_dir)  # an interrupted earlier attempt: start it again
        config = TrainConfig(train_file=bank.train, dev_file=bank.dev, model=model, epochs=self.epochs, seed=seed,
                             threads=1, run_dir=str(run_dir), keep_checkpoints=1, checkpoint_every_minutes=0.0,
                             **setting)
        t0 = time.perf_counter()
        code = start_training(config, echo=lambda line: None, show_progress=False)
        if code != 0:
            raise RuntimeError(f"training {run_dir} ended with exit code {code}")
        metrics = [json.loads(line) for line in (run_dir / "metrics.jsonl").read_text().splitlines() if line]
        best = max(metrics, key=lambda r: (r["dev_fine_root"], -r["step"]))  # earliest epoch on ties, as the trainer
        record = {"key": key, "treebank": bank.name, "model": model, "seed": seed, "setting": setting,
                  "dev_fine_root": best["dev_fine_root"], "dev_fine_all": best["dev_fine_all"],
                  "best_epoch": best["epoch"], "best_step": best["step"],
                  "final_dev_fine_root": metrics[-1]["dev_fine_root"], "seconds": metrics[-1]["wall_seconds"],
                  "process_seconds": round(time.perf_counter() - t0, 2), "run_dir": str(run_dir)}
        self.cache[key] = record
        with self.results_path.open("a", encoding="utf-8") as fh:
            fh.write(json.dumps(record) + "\n")
        self.trained += 1
        self.log(f"  {bank.name:>9} {model} seed {seed} {describe(setting)}: dev root {record['dev_fine_root']:.4f} "
                 f"all {record['dev_fine_all']:.4f} (epoch {record['best_epoch']}, {record['seconds']:.1f} s)")
        return record

    def measure(self, setting: dict, model: str = "rntn", treebanks: list[Treebank] | None = None,
                seeds: list[int] | None = None) -> dict:
        """Mean over seeds per treebank: {name: {root, all, seconds, roots (per seed), best_epoch}}."""
        out = {}
        for bank in treebanks or self.treebanks:
            runs = [self.run(bank, setting, seed, model) for seed in seeds or self.seeds]
            out[bank.name] = {"root": float(np.mean([r["dev_fine_root"] for r in runs])),
                              "all": float(np.mean([r["dev_fine_all"] for r in runs])),
                              "seconds": float(np.mean([r["seconds"] for r in runs])),
                              "best_epoch": float(np.mean([r["best_epoch"] for r in runs])),
                              "roots": [r["dev_fine_root"] for r in runs]}
        return out



# ---------------------------------------------------------------------------------------------
# the rule
# ---------------------------------------------------------------------------------------------


def stage_noise(candidates: list[dict], treebank: str) -> float:
    """Standard error of a difference of two seed-means on one treebank: sqrt(2 s^2 / seeds), s^2 the
    between-seed variance of dev root accuracy pooled over the stage's candidates."""
    per_seed = [c["scores"][treebank]["roots"] for c in candidates if len(c["scores"][treebank]["roots"]) >= 2]
    if not per_seed:
        return 0.0
    pooled = float(np.mean([np.var(roots, ddof=1) for roots in per_seed]))
    return math.sqrt(2 * pooled / len(per_seed[0]))


def ranks(values: list[float]) -> list[int]:
    """1 for the highest value; equal values share the better rank."""
    return [1 + sum(other > v for other in values) for v in values]


def choose(candidates: list[dict], treebanks: list[str], noise: dict[str, float], prefer_cheaper: bool) -> int:
    """Index of the candidate the rule picks (module docstring).

    Each candidate: {"scores": {treebank: {"root": mean dev root, "all": mean dev all-node accuracy,
    "seconds": mean seconds}}}.
    """
    per_bank = {t: ranks([c["scores"][t]["root"] for c in candidates]) for t in treebanks}
    mean_rank = [float(np.mean([per_bank[t][i] for t in treebanks])) for i in range(len(candidates))]
    mean_root = [float(np.mean([c["scores"][t]["root"] for t in treebanks])) for c in candidates]
    mean_all = [float(np.mean([c["scores"][t]["all"] for t in treebanks])) for c in candidates]
    for c, r in zip(candidates, mean_rank):
        c["mean_rank"] = r
    best = min(range(len(candidates)), key=lambda i: (mean_rank[i], -mean_root[i], -mean_all[i], i))
    if not prefer_cheaper:
        return best
    cost = [sum(c["scores"][t]["seconds"] for t in treebanks) for c in candidates]
    within = [i for i in range(len(candidates))
              if all(candidates[i]["scores"][t]["root"] >= candidates[best]["scores"][t]["root"] - noise[t]
                     for t in treebanks)]
    return min(within, key=lambda i: (cost[i], mean_rank[i], i))


# ---------------------------------------------------------------------------------------------
# stages and tables
# ---------------------------------------------------------------------------------------------


def describe(setting: dict) -> str:
    return " ".join(f"{KNOB_LABELS.get(k, k)}={setting[k]:g}" for k in setting)


def stage_values(knob: str, point: dict, neighbours_only: bool = False) -> list[tuple[str, dict]]:
    """(label, setting) for every value of the knob's grid, the other knobs at ``point``; with
    ``neighbours_only``, the current value and its neighbours in the grid (for the re-check)."""
    if knob == "l2_scale":
        out = []
        for m in L2_SCALE_MULTIPLIERS:
            out.append((f"{tidy(L2_BASE * m):g}", {**point, **{g: tidy(L2_BASE * m) for g in L2_GROUPS}}))
        return out
    if knob in L2_GROUPS:
        return [(f"{tidy(point[knob] * m):g}", {**point, knob: tidy(point[knob] * m)}) for m in L2_GROUP_MULTIPLIERS]
    grid = {"dim": DIMS, "batch_size": BATCH_SIZES, "lr": LRS}[knob]
    if neighbours_only and point[knob] in grid:
        i = grid.index(point[knob])
        grid = grid[max(0, i - 1) : i + 2]
    return [(f"{v:g}", {**point, knob: v}) for v in grid]


def markdown_table(title: str, knob: str, candidates: list[dict], treebanks: list[str], chosen: int) -> str:
    head = f"| {KNOB_LABELS.get(knob, knob)} |"
    rule = "|---|"
    for t in treebanks:
        head += f" {t} dev root | {t} dev all | {t} s |"
        rule += "---|---|---|"
    head += " mean rank | |"
    rule += "---|---|"
    lines = [f"**{title}**", "", head, rule]
    for i, c in enumerate(candidates):
        row = f"| {c['label']} |"
        for t in treebanks:
            s = c["scores"][t]
            row += f" {s['root']:.4f} | {s['all']:.4f} | {s['seconds']:.1f} |"
        row += f" {c.get('mean_rank', float('nan')):.1f} | {'chosen' if i == chosen else ''} |"
        lines.append(row)
    return "\n".join(lines)


def run_stage(sweep: Sweep, knob: str, point: dict, title: str, model: str = "rntn",
              treebanks: list[Treebank] | None = None, values: list[tuple[str, dict]] | None = None,
              seeds: list[int] | None = None):
    banks = treebanks or sweep.treebanks
    values = values if values is not None else stage_values(knob, point)
    seeds = seeds or sweep.seeds
    sweep.log(f"stage {title}: {len(values)} values x {len(banks)} treebanks x {len(seeds)} seeds")
    candidates = [{"label": label, "setting": setting, "scores": sweep.measure(setting, model, banks, seeds)}
                  for label, setting in values]
    names = [b.name for b in banks]
    noise = {t: stage_noise(candidates, t) for t in names}
    chosen = choose(candidates, names, noise, prefer_cheaper=knob in COST_KNOBS)
    table = markdown_table(title, knob, candidates, names, chosen)
    noise_text = ", ".join(f"{t} {noise[t]:.4f}" for t in names)
    return candidates[chosen]["setting"], {"knob": knob, "title": title, "candidates": candidates, "chosen": chosen,
                                           "noise": noise, "markdown": table + f"\n\nnoise (SE of a difference of "
                                                                               f"seed-means, dev root): {noise_text}"}


def test_scores(sweep: Sweep, setting: dict, model: str = "rntn", seeds: list[int] | None = None) -> dict:
    """Mean test scores of the best checkpoints of the setting's runs (one per treebank and seed)."""
    out = {}
    for bank in sweep.treebanks:
        roots, alls = [], []
        for seed in seeds or sweep.seeds:
            record = sweep.run(bank, setting, seed, model)
            path = Path(record["run_dir"]) / checkpoint_name(record["best_step"])
            (row,) = evaluate_checkpoint(str(path), [bank.test])
            if row.error:
                raise RuntimeError(row.error)
            roots.append(row.scores["fine_root"])
            alls.append(row.scores["fine_all"])
        out[bank.name] = {"root": float(np.mean(roots)), "all": float(np.mean(alls))}
    return out


def warm_up(directory: Path, bank: Treebank) -> None:
    """Load every model's compiled kernels once, so that no timed run pays for it (not recorded)."""
    for model in ("rntn", "mvrnn"):
        run_dir = directory / model
        remove_run_dir(run_dir)
        config = TrainConfig(train_file=bank.dev, model=model, dim=4, epochs=1, run_dir=str(run_dir),
                             checkpoint_every_minutes=0.0)
        start_training(config, echo=lambda line: None, show_progress=False)


def main(argv: list[str] | None = None) -> dict:
    parser = argparse.ArgumentParser(description="Choose default settings by a coordinate search on two treebanks.")
    parser.add_argument("--epochs", type=int, default=20, help="epochs per run (fixed; the best epoch's dev score "
                                                               "counts)")
    parser.add_argument("--seeds", type=int, nargs="+", default=[0, 1], help="seeds of the search stages")
    parser.add_argument("--final-seeds", type=int, nargs="+", default=[0, 1, 2, 3],
                        help="seeds of the finalists, the test scores, the MV-RNN stage and the reference row")
    parser.add_argument("--demo-files", nargs=3, default=DEMO_FILES, metavar=("TRAIN", "DEV", "TEST"))
    parser.add_argument("--generated-sizes", type=int, nargs=3, default=(6000, 800, 800),
                        metavar=("TRAIN", "DEV", "TEST"), help="trees per split of the generated treebank")
    parser.add_argument("--generated-seed", type=int, default=2718)
    parser.add_argument("--work-dir", type=Path, default=Path(tempfile.gettempdir()) / "rntn-sweep-defaults",
                        help="generated treebank, run directories and the results cache")
    parser.add_argument("--recheck", nargs="*", default=["dim", "batch_size", "lr"],
                        choices=["dim", "batch_size", "lr"],
                        help="knobs searched again at the final point, over the chosen value and its grid neighbours")
    parser.add_argument("--mvrnn-treebanks", nargs="*", default=["demo"], choices=["demo", "generated"])
    parser.add_argument("--no-reference", action="store_true", help="skip the previous-defaults reference row")
    parser.add_argument("--grid", action="append", default=[], metavar="KNOB=V1,V2,...",
                        help="replace a grid (dim, batch_size, lr, l2_scale, l2_group, mv): for quick trials")
    parser.add_argument("--out", type=Path, help="also write the markdown report here")
    parser.add_argument("--json", action="store_true", help="print the result as JSON instead of markdown")
    args = parser.parse_args(argv)

    global DIMS, BATCH_SIZES, LRS, L2_SCALE_MULTIPLIERS, L2_GROUP_MULTIPLIERS, MV_L2_WORD_MATRICES
    for item in args.grid:
        knob, _, values = item.partition("=")
        parsed = tuple(float(v) for v in values.split(","))
        if knob == "dim":
            DIMS = tuple(int(v) for v in parsed)
        elif knob == "batch_size":
            BATCH_SIZES = tuple(int(v) for v in parsed)
        elif knob == "lr":
            LRS = parsed
        elif knob == "l2_scale":
            L2_SCALE_MULTIPLIERS = parsed
        elif knob == "l2_group":
            L2_GROUP_MULTIPLIERS = parsed
        elif knob == "mv":
            MV_L2_WORD_MATRICES = parsed
        else:
            parser.error(f"--grid: unknown knob {knob!r}")

    log = (lambda line: print(line, file=sys.stderr, flush=True))
    args.work_dir.mkdir(parents=True, exist_ok=True)
    started = time.perf_counter()
    demo = Treebank("demo", *args.demo_files)
    generated = generate_sweep_treebank(args.work_dir / "generated-treebank", tuple(args.generated_sizes),
                                        args.generated_seed)
    runs_dir = args.work_dir / "runs"
    runs_dir.mkdir(exist_ok=True)
    warm_up(args.work_dir / "warm-up", demo)
    sweep = Sweep([demo, generated], args.seeds, args.epochs, runs_dir, args.work_dir / "results.jsonl", log)
    base = {**BASE, "dim": DIMS[len(DIMS) // 2], "batch_size": BATCH_SIZES[len(BATCH_SIZES) // 2],
            "lr": LRS[len(LRS) // 2]}

    point, stages = dict(base), []
    for knob in ("dim", "batch_size", "lr", "l2_scale", *L2_GROUPS):
        point, stage = run_stage(sweep, knob, point, f"{len(stages) + 1}. {KNOB_LABELS[knob]}")
        stages.append(stage)
    for knob in args.recheck:
        point, stage = run_stage(sweep, knob, point, f"{len(stages) + 1}. {KNOB_LABELS[knob]} again",
                                 values=stage_values(knob, point, neighbours_only=True))
        stages.append(stage)
    # finalists: every setting the re-checks tried, now over --final-seeds (more seeds, less noise)
    finalists: list[dict] = []
    for stage in stages[len(stages) - len(args.recheck):] if args.recheck else stages[-1:]:
        for c in stage["candidates"]:
            if c["setting"] not in finalists:
                finalists.append(c["setting"])
    varied = [k for k in finalists[0] if len({f[k] for f in finalists}) > 1]
    final_values = [(" ".join(f"{KNOB_LABELS[k]}={f[k]:g}" for k in varied) or "the point", f) for f in finalists]
    chosen, final_stage = run_stage(sweep, "finalists", point, f"{len(stages) + 1}. finalists, "
                                    f"{len(args.final_seeds)} seeds", values=final_values, seeds=args.final_seeds)
    stages.append(final_stage)
    chosen = dict(chosen)
    chosen_dev = sweep.measure(chosen, seeds=args.final_seeds)
    chosen_test = test_scores(sweep, chosen, seeds=args.final_seeds)

    mv_banks = [b for b in sweep.treebanks if b.name in args.mvrnn_treebanks]
    mv_values = [(f"{v:g}", {**chosen, "l2_word_matrices": v}) for v in MV_L2_WORD_MATRICES]
    mv_point, mv_stage = run_stage(sweep, "l2_word_matrices", chosen, "MV-RNN: l2_word_matrices", "mvrnn",
                                   mv_banks, mv_values, seeds=args.final_seeds)
    reference = None if args.no_reference else {
        "dev": sweep.measure(PREVIOUS_DEFAULTS, seeds=args.final_seeds),
        "test": test_scores(sweep, PREVIOUS_DEFAULTS, seeds=args.final_seeds)}

    machine = {"date": datetime.date.today().isoformat(), "python": platform.python_version(),
               "numpy": np.__version__, "cpus": os.cpu_count(), "platform": platform.platform(),
               "processor": platform.processor() or platform.machine()}
    command = "python scripts/sweep_defaults.py " + " ".join(sys.argv[1:] if argv is None else argv)
    result = {"command": command.strip(), "machine": machine, "epochs": args.epochs, "seeds": args.seeds,
              "final_seeds": args.final_seeds,
              "base": base, "stages": stages, "chosen": chosen, "chosen_dev": chosen_dev, "chosen_test": chosen_test,
              "mvrnn": {"stage": mv_stage, "l2_word_matrices": mv_point["l2_word_matrices"]},
              "previous_defaults": PREVIOUS_DEFAULTS, "reference": reference,
              "trainings": len(sweep.cache), "trained_now": sweep.trained,
              "sweep_seconds": round(time.perf_counter() - started, 1)}
    report = markdown_report(result, [b.name for b in sweep.treebanks])
    if args.out:
        args.out.write_text(report + "\n", encoding="utf-8")
    if args.json:
        for stage in (*stages, mv_stage):
            stage.pop("markdown")
        print(json.dumps(result, indent=1, default=str))
    else:
        print(report)
    return result


def markdown_report(result: dict, treebanks: list[str]) -> str:
    m = result["machine"]
    lines = [f"# defaults sweep: `{result['command']}`", "",
             f"{m['date']}; {m['cpus']} cpus ({m['processor']}), {m['platform']}, Python {m['python']}, "
             f"NumPy {m['numpy']}; {result['epochs']} epochs per run, seeds {result['seeds']} "
             f"(finalists, test, MV-RNN and reference: {result['final_seeds']}), "
             f"{result['trainings']} trainings in the cache ({result['trained_now']} trained in this call, "
             f"{result['sweep_seconds']:.0f} s)", "",
             f"base point: {describe(result['base'])}", ""]
    for stage in result["stages"]:
        lines += [stage["markdown"], ""]
    lines += [f"chosen: {describe(result['chosen'])}", ""]
    head = "| setting | treebank | dev root | dev all | test root | test all | s per run |"
    rule = "|---|---|---|---|---|---|---|"
    lines += [head, rule]
    rows = [("chosen", result["chosen_dev"], result["chosen_test"])]
    if result["reference"]:
        rows.append(("previous defaults", result["reference"]["dev"], result["reference"]["test"]))
    for name, dev, test in rows:
        for t in treebanks:
            lines.append(f"| {name} | {t} | {dev[t]['root']:.4f} | {dev[t]['all']:.4f} | {test[t]['root']:.4f} | "
                         f"{test[t]['all']:.4f} | {dev[t]['seconds']:.1f} |")
    lines += ["", result["mvrnn"]["stage"]["markdown"], "",
              f"chosen l2_word_matrices: {result['mvrnn']['l2_word_matrices']:g}"]
    return "\n".join(lines)


if __name__ == "__main__":
    main()
