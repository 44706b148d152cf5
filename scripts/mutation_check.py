"""Mutation check: does the test suite catch small, deliberate bugs in the code it claims to prove?

Run by hand (it takes minutes; not part of the test suite or CI):

    python scripts/mutation_check.py                 # every mutation, each against its test files
    python scripts/mutation_check.py --full          # each mutation against the whole suite (slow)
    python scripts/mutation_check.py --only adagrad-eps-fused --only epoch-no-shuffle
    python scripts/mutation_check.py --list          # the table, nothing run

What it does:
  1. copies the repository's files (git's tracked and untracked-but-not-ignored files) to a
     temporary directory; nothing in the working tree is ever changed;
  2. runs the test files the mutations name on the unmutated copy: they must pass (baseline);
  3. for each mutation in MUTATIONS: replaces one exact piece of source text in one file of the
     copy (the text must occur exactly once, or the check stops with an error: update the table
     when the code moves), runs pytest on the copy (PYTHONPATH = the copy, stop at the first
     failure), records the first failing test, and restores the file;
  4. prints one line per mutation and exits 1 if any mutation survived (no test failed) or
     could not be judged (pytest error without a failing test, or a timeout); 2 on a bad table
     or a failing baseline.

Each mutation names the test files to run, so the check takes minutes rather than an hour; they
are files of the suite, and --full runs the whole suite for each mutation instead.

numba caches compiled kernels by source file, keyed on the file's modification time and size:
a mutated file gets a new time, and the restored file gets its original time back, so neither
is served stale machine code (no kernel calls a kernel of another file). Python byte-code
caching is switched off in the copy.
"""

from __future__ import annotations

import argparse
import datetime
import os
import platform
import shutil
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path
from xml.etree import ElementTree

REPO = Path(__file__).resolve().parents[1]


@dataclass(frozen=True)
class Mutation:
    name: str
    path: str  # file inside the repository
    old: str  # exact text, must occur exactly once in the file
    new: str
    what: str  # the bug it simulates
    tests: tuple[str, ...]  # test files to run (in this order; pytest stops at the first failure)


MUTATIONS = [
    # --- kernels ---------------------------------------------------------------------------------------
    Mutation("tanh-derivative", "rntn_engine/kernels/tree_compose.py",
             "Delta[m, k] = E[i, k] * (1.0 - P[i, k] * P[i, k])",
             "Delta[m, k] = E[i, k] * (1.0 + P[i, k] * P[i, k])",
             "RNN/RNTN backward: wrong tanh derivative",
             ("tests/test_gradients_independent.py", "tests/test_kernels_match_reference.py")),
    Mutation("tensor-half-dropped", "rntn_engine/kernels/tensor_term.py",
             "Z[m, k] += 0.5 * hv[k]",
             "Z[m, k] += hv[k]",
             "RNTN forward: tensor term twice as large",
             ("tests/test_kernels_match_reference.py", "tests/test_gradients_independent.py")),
    Mutation("pair-diagonal-doubled", "rntn_engine/kernels/tensor_term.py",
             "T[k, p] = V[k, i, i]",
             "T[k, p] = 2 * V[k, i, i]",
             "RNTN forward-only pair layout: the diagonal of V counted twice",
             ("tests/test_kernels_match_reference.py",)),
    Mutation("own-kernel-row-mixed", "rntn_engine/kernels/tensor_term.py",
             "a3[j] += x3 * vj",
             "a3[j] += x2 * vj",
             "own tensor kernel: the fourth node of a block takes the third node's x",
             ("tests/test_tensor_term.py",)),
    Mutation("pair-gradient-half-folded", "rntn_engine/kernels/tensor_term.py",
             "dV[k, i + j, i] = row[j]",
             "dV[k, i + j, i] = 0.0 * row[j]",
             "RNTN tensor gradient: the pair layout folded into one triangle of dV only",
             ("tests/test_kernels_match_reference.py", "tests/test_gradients_independent.py")),
    Mutation("chunk-cut-one-short", "rntn_engine/kernels/chunk_balance.py",
             "mid, node_work, level_work) <= chunks:",
             "mid, node_work, level_work) < chunks:",
             "chunk balance: the cut uses one chunk fewer than it may (not the smallest largest chunk)",
             ("tests/test_chunk_balance.py",)),
    Mutation("word-gradient-overwritten", "rntn_engine/kernels/word_rows.py",
             "values[j, c] += E[i, c]",
             "values[j, c] = E[i, c]",
             "a repeated word keeps only its last leaf's gradient",
             ("tests/test_gradients_independent.py",)),
    Mutation("softmax-gradient", "rntn_engine/kernels/node_classifier.py",
             "dS[i, t] -= g",
             "dS[i, t] -= 0.5 * g",
             "classifier backward: wrong softmax cross-entropy gradient",
             ("tests/test_gradients_independent.py",)),
    Mutation("class-weight-half-applied", "rntn_engine/kernels/node_classifier.py",
             "dS[i, t] -= g",
             "dS[i, t] -= scale",
             "classifier backward: the class weight left out of the gold class's term",
             ("tests/test_gradients_independent.py",)),
    Mutation("tanh-series-term", "rntn_engine/kernels/vector_math.py",
             "q = q * r + 1.0 / 24.0",
             "q = q * r + 1.0 / 25.0",
             "vectorised exp/tanh: one wrong coefficient of the series",
             ("tests/test_vector_math.py",)),
    Mutation("exp-floor-ignored", "rntn_engine/kernels/vector_math.py",
             "return 0.0 if y < EXP_FLOOR else value",
             "return value",
             "vectorised exp: results below the smallest normal number not flushed to zero",
             ("tests/test_vector_math.py",)),
    Mutation("mvrnn-tanh-derivative", "rntn_engine/kernels/compose_matrix_vector.py",
             "Delta[m, r] = E[i, r] * (1.0 - P[i, r] * P[i, r])",
             "Delta[m, r] = E[i, r] * (1.0 + P[i, r] * P[i, r])",
             "MV-RNN backward: wrong tanh derivative",
             ("tests/test_mvrnn_gradients.py",)),
    # --- AdaGrad, both paths ---------------------------------------------------------------------------
    Mutation("adagrad-eps-fused", "rntn_engine/kernels/adagrad_step.py",
             "t = theta[i] - lr * gi / (np.sqrt(G[i]) + eps)",
             "t = theta[i] - lr * gi / np.sqrt(G[i] + eps)",
             "fused training step: eps inside the square root",
             ("tests/test_adagrad_hand_computed.py",)),
    Mutation("adagrad-eps-word-rows", "rntn_engine/kernels/adagrad_step.py",
             "t = t - lr * gi / (np.sqrt(G[r, c]) + eps)",
             "t = t - lr * gi / np.sqrt(G[r, c] + eps)",
             "word-row step: eps inside the square root",
             ("tests/test_adagrad_hand_computed.py",)),
    Mutation("word-rows-anchor-ignored", "rntn_engine/kernels/adagrad_step.py",
             "diff = t - anchor[r, c] if anchored else t",
             "diff = t",
             "word-row step: L2 pulls toward zero even when asked to pull toward the start",
             ("tests/test_adagrad_hand_computed.py", "tests/test_word_rows.py")),
    Mutation("word-rows-dense", "rntn_engine/model/objective.py",
             "            rows = merged_rows(rows, self._chunk_grads[k].rows[\"L\"].rows)",
             "            rows = np.arange(params.L.shape[0], dtype=np.int64)",
             "every word row is regularised and updated every step (the old dense L2)",
             ("tests/test_word_rows.py", "tests/test_word_rows_training.py")),
    Mutation("squares-tail-dropped", "rntn_engine/kernels/adagrad_step.py",
             "for i in range(rows * lanes, n):",
             "for i in range(rows * lanes, n - 1):",
             "the L2 penalty's sum of squares leaves out the last element of a group",
             ("tests/test_adagrad_and_determinism.py",)),
    Mutation("adagrad-l2-sign", "rntn_engine/kernels/adagrad_step.py",
             "gi = g[i] + lam * theta[i]",
             "gi = g[i] - lam * theta[i]",
             "fused step: L2 pushes parameters away from zero",
             ("tests/test_adagrad_hand_computed.py",)),
    Mutation("adagrad-frozen-ignored", "rntn_engine/model/adagrad.py",
             "update = name not in self.frozen",
             "update = True",
             "fused step updates frozen groups",
             ("tests/test_adagrad_hand_computed.py", "tests/test_cli_vectors.py")),
    # --- epoch order and resume position ---------------------------------------------------------------
    Mutation("epoch-no-shuffle", "rntn_engine/run/trainer.py",
             "return np.random.default_rng([seed, epoch]).permutation(n_trees)",
             "return np.arange(n_trees)",
             "every epoch in file order",
             ("tests/test_epoch_order.py",)),
    Mutation("trainer-no-shuffle", "rntn_engine/run/trainer.py",
             "order = epoch_order(config.seed, state.epoch, bank.n_trees)",
             "order = np.arange(bank.n_trees)",
             "training walks the trees in file order (epoch_order itself intact)",
             ("tests/test_epoch_order.py",)),
    Mutation("trainer-ignores-epoch", "rntn_engine/run/trainer.py",
             "order = epoch_order(config.seed, state.epoch, bank.n_trees)",
             "order = epoch_order(config.seed, 0, bank.n_trees)",
             "training repeats the first epoch's order every epoch",
             ("tests/test_epoch_order.py",)),
    Mutation("resume-position-lost", "rntn_engine/run/trainer.py",
             "state, history = RunState.from_record(checkpoint.state), list(checkpoint.metrics)",
             "state, history = RunState.from_record({**checkpoint.state, 'position': 0}), list(checkpoint.metrics)",
             "a resumed run restarts its epoch from the first tree",
             ("tests/test_checkpoint_fields_matter.py", "tests/test_resume_bit_identical.py")),
    Mutation("early-stopping-late", "rntn_engine/run/trainer.py",
             "state.evaluations_without_improvement >= config.patience:",
             "state.evaluations_without_improvement > config.patience:",
             "early stopping waits one evaluation too many",
             ("tests/test_run_guards.py", "tests/test_checkpoint_fields_matter.py")),
    Mutation("second-sigint-ignored", "rntn_engine/run/stop_signals.py",
             "if self._interrupts >= 2:",
             "if self._interrupts >= 3:",
             "Ctrl-C twice no longer exits at once",
             ("tests/test_resume_bit_identical.py",)),
    # --- reader and binarisation -----------------------------------------------------------------------
    Mutation("unary-innermost-label", "rntn_engine/data/treebank_reader.py",
             "if value != UNLABELLED:\n                    label[node] = value",
             "if value != UNLABELLED and label[node] == UNLABELLED:\n                    label[node] = value",
             "a unary chain keeps its innermost label",
             ("tests/test_treebank_against_nltk.py",)),
    Mutation("escape-table", "rntn_engine/data/bracket_tokens.py",
             '"-LCB-": "{",',
             '"-LCB-": "[",',
             "-LCB- read as '['",
             ("tests/test_treebank_against_nltk.py",)),
    Mutation("right-binarise-order", "rntn_engine/data/treebank_reader.py",
             "for kid in kids[-2:0:-1]:",
             "for kid in kids[1:-1]:",
             "right factoring joins the middle children in the wrong order",
             ("tests/test_treebank_against_nltk.py",)),
    Mutation("left-binarise-swapped", "rntn_engine/data/treebank_reader.py",
             "left.append(kids[0])\n                    right.append(kids[1])\n                    label.append(UNLABELLED)",
             "left.append(kids[1])\n                    right.append(kids[0])\n                    label.append(UNLABELLED)",
             "left factoring swaps the first two children",
             ("tests/test_treebank_against_nltk.py",)),
    Mutation("record-cut-ignored", "rntn_engine/data/treebank_reader.py",
             'elif text[:1] == "(":',
             "elif False:",
             "a '(' in the first column no longer ends an open tree: a missing ')' swallows the next trees",
             ("tests/test_treebank_multiline.py",)),
    Mutation("scan-unary-innermost-label", "rntn_engine/data/treebank_scan.py",
             "if value != -1:\n                        node_label[first_node + node] = value",
             "if value != -1 and node_label[first_node + node] == -1:\n"
             "                        node_label[first_node + node] = value",
             "the bulk scanner keeps a unary chain's innermost label",
             ("tests/test_treebank_bulk.py",)),
    Mutation("scan-right-binarise-order", "rntn_engine/data/treebank_scan.py",
             "for j in range(ktop - 2, kb, -1):",
             "for j in range(kb + 1, ktop - 1):",
             "the bulk scanner joins the middle children in the wrong order",
             ("tests/test_treebank_bulk.py",)),
    Mutation("scan-left-binarise-swapped", "rntn_engine/data/treebank_scan.py",
             "node_left[n_nodes] = kids[kb]\n                        node_right[n_nodes] = kids[kb + 1]\n"
             "                        node_label[n_nodes] = -1",
             "node_left[n_nodes] = kids[kb + 1]\n                        node_right[n_nodes] = kids[kb]\n"
             "                        node_label[n_nodes] = -1",
             "the bulk scanner's left factoring swaps the first two children",
             ("tests/test_treebank_bulk.py",)),
    Mutation("cache-checksum-not-verified", "rntn_engine/data/encoded_cache.py",
             'if _file_sha256(path) != manifest["sha256"][column]:',
             "if False:",
             "a damaged encoded-treebank cache entry is loaded",
             ("tests/test_encoded_cache.py",)),
    # --- scores ----------------------------------------------------------------------------------------
    Mutation("binary-tie-positive", "rntn_engine/run/scores.py",
             "p[:, pos].sum(axis=1) > p[:, neg].sum(axis=1)",
             "p[:, pos].sum(axis=1) >= p[:, neg].sum(axis=1)",
             "binary accuracy: a tie predicts the positive side",
             ("tests/test_scores_against_sklearn.py",)),
    Mutation("macro-f1-over-all-classes", "rntn_engine/run/scores.py",
             'return float(scores["f1"][present].mean())',
             'return float(scores["f1"].mean())',
             "macro-F1 averages over classes that occur nowhere",
             ("tests/test_scores_against_sklearn.py",)),
    Mutation("slice-phrase-needs-both-halves", "rntn_engine/run/slice_masks.py",
             "out[i] = out[a + left[i]] or out[a + right[i]]",
             "out[i] = out[a + left[i]] and out[a + right[i]]",
             "a phrase counts as holding a slice word only when both children hold one",
             ("tests/test_slices.py",)),
    Mutation("accuracy-counts-unlabelled", "rntn_engine/run/scores.py",
             "mask = gold >= 0\n    n = int(mask.sum())",
             "mask = gold >= -1\n    n = int(mask.sum())",
             "accuracy counts unlabelled nodes",
             ("tests/test_scores_against_sklearn.py",)),
    # --- checkpoints and self-checks -------------------------------------------------------------------
    Mutation("checksum-not-verified", "rntn_engine/data/checkpoint_file.py",
             'if verify and got != _text(datasets[name].attrs.get("sha256", "")):',
             'if not verify and got != _text(datasets[name].attrs.get("sha256", "")):',
             "a damaged checkpoint reads as good",
             ("tests/test_checkpoint_file.py",)),
    Mutation("gradcheck-nan-passes", "rntn_engine/cli/gradcheck_command.py",
             "ok = err <= threshold",
             "ok = not err > threshold",
             "rntn gradcheck passes a NaN error",
             ("tests/test_cli_gradcheck.py",)),
    # --- evaluation over workers and ranks -------------------------------------------------------------
    Mutation("worker-exception-escapes", "rntn_engine/run/checkpoint_evaluation.py",
             "except Exception as exc:  # the row's error, as from a worker process",
             "except InputError as exc:  # the row's error, as from a worker process",
             "an exception while scoring a checkpoint ends evaluate with a traceback",
             ("tests/test_evaluate_faults.py",)),
    Mutation("mpi-pieces-out-of-order", "rntn_engine/run/distributed_evaluation.py",
             "key=lambda p: p[0])",
             "key=lambda p: -p[0])",
             "the ranks' losses are summed in another order than one process's",
             ("tests/test_distributed_loss_order.py", "tests/test_mpi.py")),
    Mutation("chunk-word-rows-not-cleared", "rntn_engine/kernels/chunk_gradient.py",
             "    values[:, :] = 0.0",
             "    pass",
             "the compiled chunk gradient adds a chunk's word rows onto the previous step's",
             ("tests/test_chunk_gradient.py",)),
    Mutation("threaded-adagrad-skips-a-range", "rntn_engine/kernels/adagrad_step.py",
             "        squares[p] = adagrad_l2_step(",
             "        squares[p] = 0.0 if p == cuts.shape[0] - 2 else adagrad_l2_step(",
             "the threaded AdaGrad leaves its last element range un-updated",
             ("tests/test_chunk_gradient.py", "tests/test_parallel_parts.py")),
    Mutation("set-fold-keeps-minus-zero", "rntn_engine/kernels/tensor_term.py",
             "                row[j] = zero + first[j]",
             "                row[j] = first[j]",
             "writing dV from the pair layout differs from zeroing then adding where dT holds -0.0",
             ("tests/test_tensor_term.py",)),
    Mutation("chunk-sums-not-zeroed", "rntn_engine/model/objective.py",
             "            self._chunk_grads[k].dense[:] = 0",
             "            pass",
             "a chunk's dense gradient sums carry over from the previous step",
             ("tests/test_chunk_gradient.py", "tests/test_adagrad_and_determinism.py")),
    Mutation("adagrad-squares-drop-the-tail", "rntn_engine/kernels/adagrad_step.py",
             "        total += v * v\n        if update:",
             "        total += 0.0 * v\n        if update:",
             "the update's own sum of squares leaves out the elements after the last row of lanes",
             ("tests/test_adagrad_and_determinism.py",)),
    Mutation("fold-drops-a-chunk", "rntn_engine/kernels/tensor_term.py",
             "            for c in range(1, chunks):",
             "            for c in range(1, chunks - 1):",
             "the fold of the chunks' tensor gradients into dV leaves out the last chunk",
             ("tests/test_tensor_term.py", "tests/test_gradients_independent.py")),
]

def copy_repository(target: Path) -> None:
    """The repository's files (tracked, and untracked but not ignored) copied to ``target``, times kept."""
    listed = subprocess.run(["git", "ls-files", "-co", "--exclude-standard", "-z"], cwd=REPO, capture_output=True,
                            check=True).stdout.decode("utf-8").split("\0")
    for name in filter(None, listed):
        source = REPO / name
        if source.is_file():
            (target / name).parent.mkdir(parents=True, exist_ok=True)
            shutil.copy2(source, target / name)


def check_table(root: Path, mutations: list[Mutation]) -> list[str]:
    """Problems with the table: a pattern that does not occur exactly once, a test file that is missing."""
    problems = []
    for m in mutations:
        path = root / m.path
        count = path.read_text(encoding="utf-8").count(m.old) if path.is_file() else -1
        if count != 1:
            where = "file missing" if count < 0 else f"found {count} times"
            problems.append(f"{m.name}: the text to replace in {m.path} must occur exactly once ({where}): {m.old!r}")
        problems += [f"{m.name}: no test file {t}" for t in m.tests if not (root / t).is_file()]
    return problems


def first_failure(junit: Path) -> str | None:
    """``file::test`` of the first failed test in pytest's JUnit XML report, or None."""
    if not junit.is_file():
        return None
    for case in ElementTree.parse(junit).getroot().iter("testcase"):
        if case.find("failure") is not None:
            module = case.get("classname", "")
            parts = module.split(".")
            # classname is "tests.test_x" or "tests.test_x.TestClass"
            file_parts = parts[:2] if len(parts) > 1 else parts
            rest = parts[2:]
            return "/".join(file_parts) + ".py::" + "::".join(rest + [case.get("name", "")])
    return None


def run_pytest(root: Path, targets: list[str], env: dict, timeout: float) -> tuple[str, str, float]:
    """(verdict, detail, seconds): verdict 'pass', 'fail' (detail: first failing test), 'error' or 'timeout'."""
    junit = root.parent / "last-run.xml"
    junit.unlink(missing_ok=True)
    start = time.monotonic()
    try:
        done = subprocess.run([sys.executable, "-m", "pytest", "-x", "-q", "-p", "no:cacheprovider",
                               f"--junitxml={junit}", *targets], cwd=root, env=env, capture_output=True, text=True,
                              timeout=timeout)
    except subprocess.TimeoutExpired:
        return "timeout", f"no result within {timeout:.0f} s", time.monotonic() - start
    seconds = time.monotonic() - start
    if done.returncode == 0:
        return "pass", "", seconds
    failed = first_failure(junit)
    if done.returncode == 1 and failed:
        return "fail", failed, seconds
    tail = (done.stdout + done.stderr).strip().splitlines()[-3:]
    return "error", f"pytest exit {done.returncode}: " + " | ".join(tail), seconds


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--only", action="append", default=[], metavar="NAME", help="run only this mutation")
    parser.add_argument("--full", action="store_true", help="run the whole suite for each mutation")
    parser.add_argument("--list", action="store_true", help="print the table and exit")
    parser.add_argument("--timeout", type=float, default=1200.0, help="seconds allowed per pytest run")
    parser.add_argument("--keep", action="store_true", help="keep the temporary copy")
    args = parser.parse_args()

    chosen = [m for m in MUTATIONS if not args.only or m.name in args.only]
    unknown = set(args.only) - {m.name for m in MUTATIONS}
    if unknown:
        print(f"mutation_check: unknown mutation(s): {', '.join(sorted(unknown))}", file=sys.stderr)
        return 2
    if args.list:
        for m in chosen:
            print(f"{m.name:<28} {m.path:<44} {m.what}")
        return 0
    problems = check_table(REPO, chosen)
    if problems:
        print("\n".join(f"mutation_check: {p}" for p in problems), file=sys.stderr)
        return 2

    started = time.monotonic()
    workdir = Path(tempfile.mkdtemp(prefix="rntn-mutation-check-"))
    root = workdir / "repo"
    copy_repository(root)
    env = {k: v for k, v in os.environ.items() if not k.startswith("RNTN_FAULT_")}
    env.update(PYTHONPATH=str(root), PYTHONDONTWRITEBYTECODE="1", NUMBA_CACHE_DIR=str(workdir / "numba-cache"))
    where = subprocess.run([sys.executable, "-c", "import rntn_engine; print(rntn_engine.__file__)"], cwd=root,
                           env=env, capture_output=True, text=True).stdout.strip()
    if not where.startswith(str(root)):
        print(f"mutation_check: the copy's package is not the one imported ({where})", file=sys.stderr)
        return 2
    scope = "the whole suite" if args.full else "the test files each names"
    print(f"mutation check: {len(chosen)} mutations, each against {scope}")
    print(f"  {datetime.date.today()}, Python {platform.python_version()}, copy in {root}")

    all_targets = ["tests"] if args.full else list(dict.fromkeys(t for m in chosen for t in m.tests))
    verdict, detail, seconds = run_pytest(root, all_targets, env, args.timeout * 3)
    if verdict != "pass":
        print(f"baseline: the unmutated copy does not pass ({verdict}: {detail})", file=sys.stderr)
        return 2
    print(f"baseline: {len(all_targets)} test file(s) pass unmutated ({seconds:.0f} s)")

    survivors = unjudged = 0
    for n, m in enumerate(chosen, 1):
        path = root / m.path
        original = path.read_bytes()
        stat = path.stat()
        path.write_bytes(original.decode("utf-8").replace(m.old, m.new, 1).encode("utf-8"))
        # numba's on-disk cache follows a kernel's own file only: tree_compose.py's cached kernels would
        # keep the unmutated code of the tensor_term.py kernels they call. A kernel mutation therefore
        # runs with an empty cache of its own (everything it runs is compiled afresh).
        fresh_cache = workdir / f"numba-cache-{m.name}"
        run_env = dict(env, NUMBA_CACHE_DIR=str(fresh_cache)) if m.path.startswith("rntn_engine/kernels/") else env
        try:
            verdict, detail, seconds = run_pytest(root, ["tests"] if args.full else list(m.tests), run_env,
                                                  args.timeout)
        finally:
            path.write_bytes(original)
            os.utime(path, ns=(stat.st_atime_ns, stat.st_mtime_ns))
            shutil.rmtree(fresh_cache, ignore_errors=True)
        if verdict == "fail":
            result = f"caught by {detail}"
        elif verdict == "pass":
            result = "SURVIVED: no test failed"
            survivors += 1
        else:
            result = f"NOT JUDGED ({verdict}): {detail}"
            unjudged += 1
        print(f"{n:>3}/{len(chosen)} {m.name:<28} {m.path.removeprefix('rntn_engine/'):<32} {result}  ({seconds:.0f} s)",
              flush=True)
    total = time.monotonic() - started
    caught = len(chosen) - survivors - unjudged
    print(f"summary: {caught} caught, {survivors} survived, {unjudged} not judged; {total / 60:.1f} min")
    if args.keep:
        print(f"copy kept in {root}")
    else:
        shutil.rmtree(workdir, ignore_errors=True)
    return 0 if survivors == 0 and unjudged == 0 else 1


if __name__ == "__main__":
    sys.exit(main())
