"""`rntn status RUN_DIR`: is the run alive, where is it, how fast, when will it end, how good is it."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Annotated

import typer

from rntn_engine.cli.shared_options import JsonOption
from rntn_engine.cli.tables import render_pairs


def format_seconds(seconds: float | None) -> str:
    if seconds is None:
        return "unknown"
    seconds = int(round(seconds))
    h, rest = divmod(seconds, 3600)
    m, s = divmod(rest, 60)
    return f"{h} h {m:02d} min" if h else f"{m} min {s:02d} s"


def status(
    run_dir: Annotated[Path, typer.Argument(help="Run directory made by `rntn train`.")],
    as_json: JsonOption = False,
) -> None:
    """Tell whether a run is alive, where it is (epoch, step, percentage), its speed, an ETA,
    the latest dev scores and the best checkpoint. Reads only; changes nothing."""
    from rntn_engine.run.run_status import run_status

    info = run_status(run_dir)
    if as_json:
        typer.echo(json.dumps(info, indent=2))
        return
    alive = info["condition"]
    if info["pid"] is not None:
        alive += f" (pid {info['pid']}, heartbeat {info['heartbeat_age_seconds']} s ago)"
    where = f"epoch {min(info['epoch'] + 1, info['epochs'])} of {info['epochs']}, step {info['step']:,}"
    if info["total_steps"]:
        where += f" of {info['total_steps']:,} ({info['percent_done']}%)"
    pairs = [("run", f"{info['run_dir']} ({info['model']}, d={info['dim']})"), ("state", alive),
             ("position", where)]
    if info["nodes_per_second"]:
        pairs.append(("speed", f"{info['nodes_per_second']:,.0f} nodes/s"))
    if info["eta_seconds"] is not None:
        pairs.append(("time left", format_seconds(info["eta_seconds"])))
    latest = info["latest_evaluation"]
    if latest and "dev_fine_all" in latest:
        pairs.append(("latest dev", f"epoch {latest['epoch']}: fine all-nodes {latest['dev_fine_all']:.4f}, "
                                    f"root {latest['dev_fine_root']:.4f}"))
    if info["best_value"] is not None:
        pairs.append(("best", f"{info['best_metric']} {info['best_value']:.4f} in {info['best_checkpoint']}"))
    for name, holds in info["files"].items():
        pairs.append((name, holds))
    pairs.append(("checkpoints", f"{info['checkpoints']} (newest valid: {info['newest_checkpoint'] or 'none'})"))
    for problem in info["damaged_checkpoints"]:
        pairs.append(("damaged", problem))
    typer.echo(render_pairs(pairs))
