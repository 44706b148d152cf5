"""PNG figures of a run: learning curves and the confusion matrix of the best checkpoint.

matplotlib is an optional extra (``pip install .[plot]``); :func:`require_matplotlib`
raises :class:`MissingPlotLibrary` with the install command when it is absent.
The Agg backend is used, so no display is needed.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np


class MissingPlotLibrary(RuntimeError):
    """matplotlib is not installed."""


def require_matplotlib():
    try:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        raise MissingPlotLibrary("figures need matplotlib, an optional extra: "
                                 "pip install 'rntn_engine[plot]' (or pip install matplotlib)") from None
    return plt


def plot_learning_curves(history: list[dict], out: Path, title: str) -> Path:
    """Training loss (left axis) and dev accuracies (right axis) against steps."""
    plt = require_matplotlib()
    steps = [r["step"] for r in history]
    fig, loss_ax = plt.subplots(figsize=(7.5, 4.5), dpi=120)
    loss_ax.plot(steps, [r["train_loss"] for r in history], color="tab:red", marker="o", ms=3, label="training loss")
    loss_ax.set_xlabel("step")
    loss_ax.set_ylabel("training loss per tree", color="tab:red")
    handles = loss_ax.get_lines()
    if any("dev_fine_all" in r for r in history):
        score_ax = loss_ax.twinx()
        for key, colour, name in (("dev_fine_all", "tab:blue", "dev fine-grained, all nodes"),
                                  ("dev_fine_root", "tab:green", "dev fine-grained, roots")):
            pts = [(r["step"], r[key]) for r in history if key in r]
            score_ax.plot([p[0] for p in pts], [p[1] for p in pts], color=colour, marker="s", ms=3, label=name)
        score_ax.set_ylabel("dev accuracy")
        score_ax.set_ylim(0, 1)
        handles = handles + score_ax.get_lines()
    loss_ax.legend(handles, [h.get_label() for h in handles], loc="center right", fontsize=8)
    loss_ax.set_title(title)
    fig.tight_layout()
    fig.savefig(out)
    plt.close(fig)
    return out


def plot_confusion(confusion: np.ndarray, out: Path, title: str) -> Path:
    """Row-normalised confusion matrix with counts in the cells."""
    plt = require_matplotlib()
    C = confusion.shape[0]
    rows = confusion.sum(axis=1, keepdims=True)
    share = np.divide(confusion, rows, out=np.zeros(confusion.shape), where=rows > 0)
    fig, ax = plt.subplots(figsize=(5, 4.5), dpi=120)
    image = ax.imshow(share, cmap="Greens", vmin=0, vmax=1)
    for g in range(C):
        for p in range(C):
            ax.text(p, g, f"{confusion[g, p]}", ha="center", va="center",
                    color="white" if share[g, p] > 0.6 else "black", fontsize=8)
    ax.set_xticks(range(C))
    ax.set_yticks(range(C))
    ax.set_xlabel("predicted class")
    ax.set_ylabel("gold class")
    ax.set_title(title, fontsize=9)
    fig.colorbar(image, ax=ax, label="share of the gold class")
    fig.tight_layout()
    fig.savefig(out)
    plt.close(fig)
    return out
