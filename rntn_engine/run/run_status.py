"""What a run is doing: alive or not, where it is, how fast, when it will end, how good it is.

Read-only: looks at the lock, progress.json (the living trainer's heartbeat),
metrics.jsonl and the newest valid checkpoint; never changes a file.
"""

from __future__ import annotations

import json
import time
from pathlib import Path

from rntn_engine.data.checkpoint_file import CheckpointUnavailableError
from rntn_engine.run.checkpoints import newest_valid_checkpoint
from rntn_engine.run.run_directory import (
    BEST_FILE,
    METRICS_FILE,
    MODEL_FILE,
    PROGRESS_FILE,
    list_checkpoints,
    lock_is_held,
)
from rntn_engine.run.trainer import stored_config


def _read_json_lines(path: Path) -> list[dict]:
    records = []
    if path.exists():
        for line in path.read_text(encoding="utf-8").splitlines():
            try:
                records.append(json.loads(line))
            except ValueError:
                continue  # a line cut by a crash
    return records


def run_status(run_dir: Path) -> dict:
    """A JSON-ready summary of the run in ``run_dir`` (see module docstring)."""
    config = stored_config(run_dir)
    holder = lock_is_held(run_dir)
    progress = {}
    if (run_dir / PROGRESS_FILE).exists():
        try:
            progress = json.loads((run_dir / PROGRESS_FILE).read_text(encoding="utf-8"))
        except ValueError:
            progress = {}
    try:
        newest, damaged_files = newest_valid_checkpoint(run_dir)
        damaged = [str(exc) for _, exc in damaged_files]
    except CheckpointUnavailableError as exc:  # busy or unreadable now: say so, change nothing
        newest, damaged = None, [str(exc)]
    checkpoint_state, checkpoint_name = None, None
    if newest is not None:
        checkpoint_state, checkpoint_name, config = newest.state, Path(newest.path).name, newest.config
    metrics = _read_json_lines(run_dir / METRICS_FILE)
    state = progress if holder is not None and progress else (checkpoint_state or {})
    finished = bool(checkpoint_state and checkpoint_state.get("finished"))
    if holder is not None:
        condition = "running"
    elif finished:
        condition = f"finished ({checkpoint_state.get('finish_reason', '')})"
    elif checkpoint_state is not None:
        condition = "stopped; resumable with `rntn resume`"
    else:
        condition = "not started or killed before its first checkpoint; `rntn resume` starts it"
    n_trees = progress.get("trees_per_epoch")
    steps_per_epoch = progress.get("steps_per_epoch")
    step = int(state.get("step", 0))
    total_steps = steps_per_epoch * config.epochs if steps_per_epoch else None
    seconds_per_step = None
    if metrics and metrics[-1].get("step"):
        seconds_per_step = metrics[-1]["wall_seconds"] / metrics[-1]["step"]
    eta = (total_steps - step) * seconds_per_step if total_steps and seconds_per_step and not finished else None
    return {
        "run_dir": str(run_dir),
        "model": config.model, "dim": config.dim, "epochs": config.epochs,
        "condition": condition,
        "pid": holder.get("pid") if holder else None,
        "heartbeat_age_seconds": round(time.time() - progress["updated"], 1) if progress.get("updated") else None,
        "step": step, "epoch": int(state.get("epoch", 0)), "position": int(state.get("position", 0)),
        "trees_per_epoch": n_trees, "total_steps": total_steps,
        "percent_done": round(100.0 * step / total_steps, 1) if total_steps else None,
        "nodes_per_second": progress.get("nodes_per_second") or (metrics[-1].get("nodes_per_second") if metrics else None),
        "eta_seconds": round(eta, 1) if eta is not None else None,
        "latest_evaluation": metrics[-1] if metrics else None,
        "best_metric": config.best_metric,
        "best_value": checkpoint_state.get("best_value") if checkpoint_state else None,
        "best_checkpoint": checkpoint_state.get("best_checkpoint") if checkpoint_state else None,
        "newest_checkpoint": checkpoint_name,
        "files": model_files(run_dir, config.final_model, checkpoint_state),
        "checkpoints": len(list_checkpoints(run_dir)),
        "damaged_checkpoints": damaged,
    }


def model_files(run_dir: Path, final_model: str, state: dict | None) -> dict[str, str]:
    """What best.h5 and model.h5 hold, in words, for the files that exist."""
    files = {}
    best = (state or {}).get("best_checkpoint") or ""
    if (run_dir / BEST_FILE).exists():
        files[BEST_FILE] = f"the best checkpoint so far ({best})" if best else "the best checkpoint"
    if (run_dir / MODEL_FILE).exists():
        holds = "the best checkpoint" if final_model == "best" and best else "the last parameters"
        files[MODEL_FILE] = f"the final model: {holds} (--final-model {final_model})"
    return files
