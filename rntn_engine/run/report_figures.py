"""PNG figures of a run: learning curves, confusion matrices of the best checkpoint, scores per slice.

matplotlib is an optional extra (``pip install .[plot]``); :func:`require_matplotlib`
raises :class:`MissingPlotLibrary` with the install command when it is absent.
The Agg backend is used, so no display is needed. Legends stand outside the plotting
area, so they never cover a curve.
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


LOSS_CURVES = (("train_loss", "tab:red", "training loss"), ("dev_loss", "tab:purple", "dev loss"))
SCORE_CURVES = (("dev_fine_all", "tab:blue", "-", "dev fine-grained, all nodes"),
                ("dev_fine_root", "tab:green", "-", "dev fine-grained, roots"),
                ("dev_binary_all", "tab:blue", "--", "dev binary, all nodes"),
                ("dev_binary_root", "tab:green", "--", "dev binary, roots"),
                ("dev_macro_f1_root", "tab:orange", ":", "dev macro-F1, roots"))


def _series(history: list[dict], key: str) -> tuple[list[int], list[float]]:
    points = [(r["step"], r[key]) for r in history if r.get(key) is not None and r[key] == r[key]]
    return [p[0] for p in points], [p[1] for p in points]


def plot_learning_curves(history: list[dict], out: Path, title: str, best_step: int | None = None,
                         best_metric: str = "") -> Path:
    """Losses (top: training and dev, per labelled node) and dev scores (bottom) against steps;
    the best checkpoint marked in both."""
    plt = require_matplotlib()
    fig, (loss_ax, score_ax) = plt.subplots(2, 1, figsize=(9, 6.5), dpi=120, sharex=True)
    for key, colour, name in LOSS_CURVES:
        steps, values = _series(history, key)
        if steps:
            loss_ax.plot(steps, values, color=colour, marker="o", ms=3, label=name)
    loss_ax.set_ylabel("cross-entropy per labelled node")
    loss_ax.set_title(title)
    has_scores = False
    for key, colour, style, name in SCORE_CURVES:
        steps, values = _series(history, key)
        if steps:
            has_scores = True
            score_ax.plot(steps, values, color=colour, linestyle=style, marker="s", ms=3, label=name)
    score_ax.set_ylabel("dev score")
    score_ax.set_ylim(0, 1)
    score_ax.set_xlabel("step")
    if not has_scores:
        score_ax.text(0.5, 0.5, "no dev scores (the run has no dev file)", ha="center", va="center",
                      transform=score_ax.transAxes, color="grey")
    if best_step is not None:
        for ax in (loss_ax, score_ax):
            ax.axvline(best_step, color="black", linestyle="--", linewidth=1,
                       label=f"best checkpoint (step {best_step}{', ' + best_metric if best_metric else ''})")
    for ax in (loss_ax, score_ax):
        ax.grid(alpha=0.3)
        if ax.get_legend_handles_labels()[0]:
            ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8, borderaxespad=0)
    fig.tight_layout()
    fig.savefig(out, bbox_inches="tight")
    plt.close(fig)
    return out


def _draw_confusion(ax, confusion: np.ndarray, names: list[str], title: str):
    C = confusion.shape[0]
    rows = confusion.sum(axis=1, keepdims=True)
    share = np.divide(confusion, rows, out=np.zeros(confusion.shape), where=rows > 0)
    image = ax.imshow(share, cmap="Greens", vmin=0, vmax=1)
    for g in range(C):
        for p in range(C):
            ax.text(p, g, f"{confusion[g, p]}", ha="center", va="center",
                    color="white" if share[g, p] > 0.6 else "black", fontsize=8)
    ax.set_xticks(range(C), names, rotation=35, ha="right", fontsize=8)
    ax.set_yticks(range(C), names, fontsize=8)
    ax.set_xlabel("predicted class")
    ax.set_ylabel("gold class")
    ax.set_title(title, fontsize=9)
    return image


def plot_confusions(confusions: dict[str, np.ndarray], names: list[str], out: Path, title: str) -> Path:
    """Row-normalised confusion matrices side by side (e.g. roots and all nodes), counts in the cells."""
    plt = require_matplotlib()
    fig, axes = plt.subplots(1, len(confusions), figsize=(4.6 * len(confusions) + 1.5, 5), dpi=120, squeeze=False,
                             layout="constrained")
    image = None
    for k, (ax, (scope, confusion)) in enumerate(zip(axes[0], confusions.items())):
        image = _draw_confusion(ax, confusion, names, scope)
        if k:  # the classes are the same: one set of row labels, on the left
            ax.set_yticklabels([])
            ax.set_ylabel("")
    fig.suptitle(title, fontsize=10)
    fig.colorbar(image, ax=list(axes[0]), label="share of the gold class", shrink=0.8)
    fig.savefig(out, bbox_inches="tight")
    plt.close(fig)
    return out


SCORE_LABELS = {"fine_all": "fine-grained, all nodes", "fine_root": "fine-grained, roots",
                "binary_all": "binary, all nodes", "binary_root": "binary, roots",
                "macro_f1_all": "macro-F1, all nodes", "macro_f1_root": "macro-F1, roots"}


def plot_slice_scores(rows: list[dict], out: Path, title: str, scores=("fine_all", "fine_root", "binary_all")) -> Path:
    """One group of bars per slice (``rows``: {"slice": name, "nodes": n, score: value, ...}), all scores 0..1."""
    plt = require_matplotlib()
    names = [f"{r['slice']}\n({r.get('nodes', 0):,} nodes)" for r in rows]
    x = np.arange(len(rows))
    width = 0.8 / len(scores)
    fig, ax = plt.subplots(figsize=(max(6.0, 1.4 * len(rows) + 2.5), 4.5), dpi=120)
    for k, score in enumerate(scores):
        values = [r.get(score, np.nan) for r in rows]
        bars = ax.bar(x + (k - (len(scores) - 1) / 2) * width, np.nan_to_num(values), width,
                      label=SCORE_LABELS.get(score, score.replace("_", " ")))
        for bar, value in zip(bars, values):
            if value == value:
                ax.text(bar.get_x() + bar.get_width() / 2, value + 0.01, f"{value:.2f}", ha="center", fontsize=7)
    ax.set_xticks(x, names, fontsize=8)
    ax.set_ylim(0, 1.08)
    ax.set_ylabel("score")
    ax.set_title(title, fontsize=10)
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8, borderaxespad=0)
    ax.grid(axis="y", alpha=0.3)
    fig.tight_layout()
    fig.savefig(out, bbox_inches="tight")
    plt.close(fig)
    return out
