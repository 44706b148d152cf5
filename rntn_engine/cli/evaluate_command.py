"""`rntn evaluate`: score many checkpoints on treebanks in one table and mark the best."""

from __future__ import annotations

import csv
import json
import os
from pathlib import Path
from typing import Annotated, Optional

import typer

from rntn_engine.cli.app_exit import EXIT_BAD_INPUT, EXIT_STOPPED_RESUMABLE, EXIT_USAGE
from rntn_engine.cli.shared_options import JobsOption, JsonOption, MpiOption, ProgressOption
from rntn_engine.cli.slice_options import SliceFilesOption, SliceOption, slices_from_options
from rntn_engine.cli.tables import render_table
from rntn_engine.data.errors import InputError

SCORE_HEADERS = {"fine_all": "fine all", "fine_root": "fine root", "binary_all": "binary all",
                 "binary_root": "binary root", "macro_f1_all": "macro-F1 all", "macro_f1_root": "macro-F1 root",
                 "loss": "loss"}
WHOLE_TREEBANK = "(all)"  # the slice column of a whole-treebank row


def _neutral(value: str | None) -> int | None:
    if value is None:
        return -1  # the default scheme for the checkpoint's number of classes
    if value.lower() == "none":
        return None
    try:
        return int(value)
    except ValueError:
        raise typer.BadParameter("expected a class number or 'none'", param_hint="--neutral-class") from None


def _number(x: float, digits: int = 4) -> str:
    return "-" if x is None or x != x else f"{x:.{digits}f}"


def evaluate(
    checkpoints: Annotated[list[str], typer.Argument(help="Checkpoint files, glob patterns (quote them) or run directories (all their checkpoints).")],
    treebank: Annotated[list[Path], typer.Option("--treebank", "-t", help="Treebank to score on; repeat for several.")],
    jobs: JobsOption = None,
    best_by: Annotated[str, typer.Option("--best-by", help="Score that marks the best row per treebank: fine_root, fine_all, binary_root, binary_all, macro_f1_root, macro_f1_all or loss (lowest).")] = "fine_root",
    neutral_class: Annotated[Optional[str], typer.Option("--neutral-class", help="Neutral class left out of binary scores, or 'none'. [default: C//2 for odd C, none for even C]")] = None,
    out: Annotated[Optional[Path], typer.Option("--out", help="Also write the table to OUT.csv and OUT.json.")] = None,
    detail: Annotated[bool, typer.Option("--detail", help="For one checkpoint: per-class precision/recall/F1, confusion matrices, accuracy by phrase length, and the same per slice.")] = False,
    slice_files: SliceFilesOption = None,
    slice_options: SliceOption = None,
    as_json: JsonOption = False,
    progress: ProgressOption = None,
    mpi: MpiOption = False,
) -> None:
    """Score checkpoints on treebanks: fine-grained accuracy, binary accuracy and macro-F1 at all nodes and
    at roots, and loss; for the whole treebank and for each slice (a set of nodes: phrases with given
    words, trees with given words, phrases of a length range, trees of a gold root class, nodes whose
    children lie on opposite sides of the scale).

    Binary accuracy leaves out nodes whose gold class is neutral and predicts the side
    (negative or positive classes) with the larger total probability. Worker processes
    score checkpoints in parallel; a damaged checkpoint is reported in its row and the
    others go on (exit 1 only if no checkpoint could be scored); so does an error while
    scoring or a worker that dies. SIGTERM, SIGHUP or SIGINT ends the workers and exits 75
    without output. With --mpi (under mpiexec -n N) the checkpoints, or for one checkpoint
    the treebank's pieces, are divided over the ranks, each with --jobs workers (default 1),
    and rank 0 prints and writes the same table.
    """
    from tqdm import tqdm

    from rntn_engine.run.checkpoint_evaluation import (
        SCORE_NAMES,
        WORKER_FAILED,
        evaluate_many,
        expand_checkpoint_specs,
        mark_best,
    )
    from rntn_engine.run.process_group import PeerStopped, process_group
    from rntn_engine.run.stop_signals import StopRequest
    from rntn_engine.run.worker_processes import WorkersStopped

    group = process_group(mpi)
    try:
        if best_by not in SCORE_NAMES:
            raise typer.BadParameter(f"expected one of {', '.join(SCORE_NAMES)}", param_hint="--best-by")
        neutral = _neutral(neutral_class)
        slices = slices_from_options(slice_files, slice_options)
        paths = expand_checkpoint_specs(checkpoints)
        if detail and (len(paths) != 1 or len(treebank) != 1):
            raise typer.BadParameter("--detail takes exactly one checkpoint and one --treebank", param_hint="--detail")
    except (typer.BadParameter, InputError) as exc:
        if not group.is_root:  # every rank finds the same error; rank 0 says it
            raise PeerStopped(EXIT_BAD_INPUT if isinstance(exc, InputError) else EXIT_USAGE) from None
        raise
    books = [str(t) for t in treebank]
    if detail:
        if group.is_root:  # one checkpoint on one treebank: rank 0 alone
            _print_detail(paths[0], books[0], neutral, as_json, progress, slices)
        return
    bar = tqdm(unit="tree", desc=f"{len(paths)} checkpoint(s) x {len(books)} treebank(s)",
               disable=True if not group.is_root else (None if progress is None else not progress), leave=False)
    if group.size > 1:  # a signal ends the ranks (the MPI launcher passes it on); nothing is written
        from rntn_engine.run.distributed_evaluation import evaluate_on_ranks

        rows = evaluate_on_ranks(group, paths, books, jobs or 1, neutral, progress=bar.update, slices=slices)
    else:
        with StopRequest() as stop:
            try:
                rows = evaluate_many(paths, books, jobs or os.cpu_count() or 1, neutral, progress=bar.update,
                                     slices=slices, should_stop=stop.should_stop)
            except WorkersStopped:
                bar.close()
                typer.echo(f"rntn: evaluate stopped by {stop.reason}: worker processes ended, nothing written",
                           err=True)
                raise typer.Exit(EXIT_STOPPED_RESUMABLE) from None
    bar.close()
    if not group.is_root:
        return
    mark_best(rows, best_by)
    if out is not None:
        _write_outputs(out, rows)
    if as_json:
        typer.echo(json.dumps([r.flat() for r in rows], indent=2))
    else:
        many = len(books) > 1
        header = ["best", "checkpoint", "step", "epoch", *(["treebank"] if many else []),
                  *(["slice", "nodes"] if slices else []), *(SCORE_HEADERS[s] for s in SCORE_NAMES)]
        table = []
        for r in rows:
            cells = ["*" if r.best else "", r.checkpoint, "-" if r.step is None else r.step,
                     "-" if r.epoch is None else r.epoch, *([r.treebank] if many else [])]
            if slices:
                cells += [r.slice or WHOLE_TREEBANK, r.scores.get("labelled_nodes", "-")]
            damaged = r.error and r.step is None and not r.error.startswith(WORKER_FAILED)
            cells += ["damaged" if damaged else ("error" if r.error else _number(r.scores[s]))
                      for s in SCORE_NAMES]
            table.append(cells)
        typer.echo(render_table(header, table, align="llrr" + "l" * many + "lr" * bool(slices) + "r" * len(SCORE_NAMES)))
        for r in rows:
            if r.best:
                typer.echo(f"best by {best_by}{' on ' + r.treebank if many else ''}: {r.checkpoint}")
    failed = [r for r in rows if r.error]
    for r in failed:
        typer.echo(f"rntn: could not score {r.checkpoint} on {r.treebank}: {r.error}", err=True)
    if failed and len(failed) == len(rows):
        raise typer.Exit(EXIT_BAD_INPUT)


def _write_outputs(out: Path, rows) -> None:
    base = out.with_suffix("") if out.suffix in (".csv", ".json") else out
    records = [r.flat() for r in rows]
    fields = ["checkpoint", "treebank", "slice", "step", "epoch", "best", "fine_all", "fine_root", "binary_all",
              "binary_root", "macro_f1_all", "macro_f1_root", "loss", "labelled_nodes", "trees", "error"]
    with open(f"{base}.csv", "w", newline="", encoding="utf-8") as fh:
        writer = csv.DictWriter(fh, fieldnames=fields, extrasaction="ignore")
        writer.writeheader()
        writer.writerows(records)
    Path(f"{base}.json").write_text(json.dumps(records, indent=2) + "\n", encoding="utf-8")
    typer.echo(f"wrote {base}.csv and {base}.json", err=True)


def _print_detail(path: Path, treebank: str, neutral: int | None, as_json: bool, progress: bool | None,
                  slices: tuple = ()) -> None:
    from tqdm import tqdm

    from rntn_engine.run.checkpoint_evaluation import detail_report
    from rntn_engine.run.checkpoints import load_checkpoint

    checkpoint = load_checkpoint(path)
    with tqdm(unit="tree", disable=None if progress is None else not progress, leave=False) as bar:
        try:
            report = detail_report(checkpoint, treebank, neutral, progress=bar.update, slices=slices)
        except ValueError as exc:  # a root-class slice naming a class the model does not have
            raise typer.BadParameter(str(exc), param_hint="--slice/--slices") from None
    if as_json:
        typer.echo(json.dumps(report, indent=2))
        return
    s = report["scores"]
    names = report["class_names"]
    typer.echo(f"{path} on {treebank}: {s['trees']} trees, {s['labelled_nodes']} labelled nodes; "
               f"binary sides: {report['label_scheme']}")
    typer.echo(_scope_table(s))
    _print_breakdown(report, names, "")
    typer.echo("\naccuracy by phrase length (words)")
    typer.echo(render_table(["words", "nodes", "fine", "binary"],
                            [[b["words"], b["nodes"], _number(b["fine"]), _number(b["binary"])]
                             for b in report["by_phrase_length"]]))
    for part in report["slices"]:
        t = part["scores"]
        typer.echo(f"\n=== slice {part['slice']} ({part['definition']}): {t['trees']} trees, "
                   f"{t['labelled_nodes']} labelled nodes")
        typer.echo(_scope_table(t))
        _print_breakdown(part, names, f", slice {part['slice']}")


def _scope_table(s: dict) -> str:
    return render_table(["scope", "fine", "binary", "macro-F1", "loss"],
                        [["all nodes", _number(s["fine_all"]), _number(s["binary_all"]), _number(s["macro_f1_all"]),
                          _number(s["loss"])],
                         ["roots", _number(s["fine_root"]), _number(s["binary_root"]), _number(s["macro_f1_root"]),
                          ""]])


def _print_breakdown(report: dict, names: list[str], where: str) -> None:
    """Per-class scores and the confusion matrix, for all nodes and for roots, classes by name."""
    for scope, title in (("all_nodes", "all nodes"), ("roots", "roots")):
        per = report[scope]["per_class"]
        typer.echo(f"\nper class, {title}{where}")
        typer.echo(render_table(["class", "precision", "recall", "F1", "support"],
                                [[name, _number(per["precision"][c]), _number(per["recall"][c]),
                                  _number(per["f1"][c]), per["support"][c]] for c, name in enumerate(names)]))
        typer.echo(f"\nconfusion matrix, {title}{where} (rows: gold class, columns: predicted class)")
        typer.echo(render_table(["gold \\ predicted", *names],
                                [[name, *report[scope]["confusion"][c]] for c, name in enumerate(names)]))
