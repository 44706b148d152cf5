"""`rntn inspect CHECKPOINT`: what a checkpoint or model file holds, and whether it verifies."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Annotated

import typer

from rntn_engine.cli.app_exit import EXIT_BAD_INPUT
from rntn_engine.cli.shared_options import JsonOption
from rntn_engine.cli.tables import render_pairs, render_table


def inspect(
    checkpoint: Annotated[Path, typer.Argument(help="A checkpoint-step*.h5 or model.h5 file.")],
    as_json: JsonOption = False,
) -> None:
    """Summarise a checkpoint: format version, model and sizes, position, data hashes, metrics,
    and the result of verifying every dataset's checksum (exit 1 if any fails)."""
    from rntn_engine.data.checkpoint_file import CheckpointError, CheckpointUnavailableError, read_checkpoint
    from rntn_engine.run.checkpoints import array_layout

    try:
        content = read_checkpoint(checkpoint, layout=array_layout)
        verified = f"all {len(content.arrays) + len(content.words) + len(content.records)} datasets verified"
    except (CheckpointError, CheckpointUnavailableError) as exc:
        typer.echo(f"{exc}", err=True)
        raise typer.Exit(EXIT_BAD_INPUT)
    config, state = content.records.get("config", {}), content.records.get("state", {})
    n_params = sum(int(a.size) for k, a in content.arrays.items() if k.startswith("parameters/"))
    summary = {
        "file": str(checkpoint), "format_version": content.format_version, "checksums": verified,
        "model": config.get("model"), "dim": config.get("dim"), "num_classes": config.get("num_classes"),
        "dtype": config.get("dtype"), "vocabulary": len(content.words.get("vocabulary", [])),
        "parameters": n_params, "state": state, "data_hashes": content.records.get("data_hashes", {}),
        "versions": content.records.get("versions", {}), "metrics": content.records.get("metrics", []),
        "has_optimiser_state": any(k.startswith("adagrad_sums/") for k in content.arrays),
        "role": file_role(checkpoint.name, state),
    }
    if as_json:
        typer.echo(json.dumps(summary, indent=2))
        return
    position = (f"step {state.get('step', 0):,}; {state.get('epoch', 0)} of {config.get('epochs')} epochs done, "
                f"{state.get('position', 0)} trees into the next")
    if state.get("finished"):
        position = f"finished at step {state.get('step', 0):,} ({state.get('finish_reason')})"
    pairs = [("file", summary["file"]), ("format", f"rntn_engine checkpoint, version {summary['format_version']}"),
             ("checksums", verified),
             ("model", f"{summary['model']}, d={summary['dim']}, C={summary['num_classes']}, {summary['dtype']}, "
                       f"vocabulary {summary['vocabulary']:,} words, {n_params:,} parameters"),
             ("position", position),
             ("this file", file_role(checkpoint.name, state)),
             ("written by", ", ".join(f"{k} {v}" for k, v in summary["versions"].items()))]
    for key, digest in summary["data_hashes"].items():
        pairs.append((key, f"{config.get(key, '')} sha256 {digest[:16]}..."))
    if state.get("best_value") is not None:
        pairs.append(("best", f"{config.get('best_metric')} {state['best_value']:.4f} in {state['best_checkpoint']}"))
    typer.echo(render_pairs(pairs))
    if summary["metrics"]:
        rows = [(m["epoch"], m["step"], f"{m['train_loss']:.4f}",
                 f"{m['dev_fine_all']:.4f}" if "dev_fine_all" in m else "-",
                 f"{m['dev_fine_root']:.4f}" if "dev_fine_root" in m else "-") for m in summary["metrics"]]
        typer.echo("")
        typer.echo(render_table(["epoch", "step", "train loss", "dev all-nodes", "dev root"], rows))


def file_role(name: str, state: dict) -> str:
    """What a run file is, from its name and the run state it holds."""
    from rntn_engine.run.run_directory import BEST_FILE, MODEL_FILE, checkpoint_name

    is_best = bool(state.get("best_checkpoint")) and state.get("best_checkpoint") == checkpoint_name(state.get("step", 0))
    if name == MODEL_FILE:
        return "a run's final model: " + ("its best checkpoint" if is_best else "its last parameters")
    if name == BEST_FILE:
        return f"a run's best checkpoint ({state.get('best_checkpoint')})"
    return "a checkpoint" + (", the best of its run when written" if is_best else "")
