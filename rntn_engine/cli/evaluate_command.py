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
from rntn_engine.cli.tables import render_table
from rntn_engine.data.errors import InputError

SCORE_HEADERS = {"fine_all": "fine all", "fine_root": "fine root", "binary_all": "binary all",
                 "binary_root": "binary root", "loss": "loss"}


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
    best_by: Annotated[str, typer.Option("--best-by", help="Score that marks the best row per treebank: fine_root, fine_all, binary_root, binary_all or loss (lowest).")] = "fine_root",
    neutral_class: Annotated[Optional[str], typer.Option("--neutral-class", help="Neutral class left out of binary scores, or 'none'. [default: C//2 for odd C, none for even C]")] = None,
    out: Annotated[Optional[Path], typer.Option("--out", help="Also write the table to OUT.csv and OUT.json.")] = None,
    detail: Annotated[bool, typer.Option("--detail", help="For one checkpoint: per-class precision/recall/F1, confusion matrices, accuracy by phrase length.")] = False,
    as_json: JsonOption = False,
    progress: ProgressOption = None,
    mpi: MpiOption = False,
) -> None:
    """Score checkpoints on treebanks: fine-grained and binary accuracy at all nodes and at roots, and loss.

    Binary accuracy leaves out nodes whose gold class is neutral and predicts the side
    (negative or positive classes) with the larger total probability. Worker processes
    score checkpoints in parallel; a damaged checkpoint, an error while scoring or a worker
    that dies is reported in its row and the others go on (exit 1 only if no checkpoint could
    be scored). SIGTERM, SIGHUP or SIGINT ends the workers and exits 75 without output.
    With --mpi (under mpiexec -n N) the checkpoints, or for one checkpoint the treebank's
    batches, are divided over the ranks, each with --jobs workers (default 1), and rank 0
    prints and writes the same table.
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
            _print_detail(paths[0], books[0], neutral, as_json, progress)
        return
    bar = tqdm(unit="tree", desc=f"{len(paths)} checkpoint(s) x {len(books)} treebank(s)",
               disable=True if not group.is_root else (None if progress is None else not progress), leave=False)
    if group.size > 1:  # a signal ends the ranks (the MPI launcher passes it on); nothing is written
        from rntn_engine.run.distributed_evaluation import evaluate_on_ranks

        rows = evaluate_on_ranks(group, paths, books, jobs or 1, neutral, progress=bar.update)
    else:
        with StopRequest() as stop:
            try:
                rows = evaluate_many(paths, books, jobs or os.cpu_count() or 1, neutral, progress=bar.update,
                                     should_stop=stop.should_stop)
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
                  *(SCORE_HEADERS[s] for s in SCORE_NAMES)]
        table = []
        for r in rows:
            cells = ["*" if r.best else "", r.checkpoint, "-" if r.step is None else r.step,
                     "-" if r.epoch is None else r.epoch, *([r.treebank] if many else [])]
            damaged = r.error and r.step is None and not r.error.startswith(WORKER_FAILED)
            cells += ["damaged" if damaged else ("error" if r.error else _number(r.scores[s]))
                      for s in SCORE_NAMES]
            table.append(cells)
        typer.echo(render_table(header, table, align="llrr" + "l" * many + "r" * len(SCORE_NAMES)))
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
    fields = ["checkpoint", "treebank", "step", "epoch", "best", "fine_all", "fine_root", "binary_all",
              "binary_root", "loss", "labelled_nodes", "trees", "error"]
    with open(f"{base}.csv", "w", newline="", encoding="utf-8") as fh:
        writer = csv.DictWriter(fh, fieldnames=fields, extrasaction="ignore")
        writer.writeheader()
        writer.writerows(records)
    Path(f"{base}.json").write_text(json.dumps(records, indent=2) + "\n", encoding="utf-8")
    typer.echo(f"wrote {base}.csv and {base}.json", err=True)


def _print_detail(path: Path, treebank: str, neutral: int | None, as_json: bool, progress: bool | None) -> None:
    from tqdm import tqdm

    from rntn_engine.run.checkpoint_evaluation import detail_report
    from rntn_engine.run.checkpoints import load_checkpoint

    checkpoint = load_checkpoint(path)
    with tqdm(unit="tree", disable=None if progress is None else not progress, leave=False) as bar:
        report = detail_report(checkpoint, treebank, neutral, progress=bar.update)
    if as_json:
        typer.echo(json.dumps(report, indent=2))
        return
    s = report["scores"]
    typer.echo(f"{path} on {treebank}: {s['trees']} trees, {s['labelled_nodes']} labelled nodes; "
               f"binary sides: {report['label_scheme']}")
    typer.echo(render_table(["scope", "fine", "binary"],
                            [["all nodes", _number(s["fine_all"]), _number(s["binary_all"])],
                             ["roots", _number(s["fine_root"]), _number(s["binary_root"])]]))
    C = checkpoint.config.num_classes
    for scope, title in (("all_nodes", "all nodes"), ("roots", "roots")):
        per = report[scope]["per_class"]
        typer.echo(f"\nper class, {title}")
        typer.echo(render_table(["class", "precision", "recall", "F1", "support"],
                                [[c, _number(per["precision"][c]), _number(per["recall"][c]), _number(per["f1"][c]),
                                  per["support"][c]] for c in range(C)]))
        typer.echo(f"\nconfusion matrix, {title} (rows: gold class, columns: predicted class)")
        typer.echo(render_table(["gold \\ predicted", *map(str, range(C))],
                                [[c, *report[scope]["confusion"][c]] for c in range(C)]))
    typer.echo("\naccuracy by phrase length (words)")
    typer.echo(render_table(["words", "nodes", "fine", "binary"],
                            [[b["words"], b["nodes"], _number(b["fine"]), _number(b["binary"])]
                             for b in report["by_phrase_length"]]))
