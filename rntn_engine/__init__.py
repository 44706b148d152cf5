"""rntn_engine: train and apply recursive tree models (RNN, MV-RNN, RNTN) on CPUs.

Use from Python (the names below; see rntn_engine/api.py and the README)::

    import rntn_engine as rn
    with rn.load_model("checkpoints/demo-rntn/model.h5") as model:
        results = model.predict(["The café wasn't worth the queue."])

Layers (imports point down only)::

    cli / api  typer app; the Python API
    run        run directory, training loop, evaluation
    model      parameters, objective (loss + gradient), optimiser
    kernels    numba forward/backward kernels on flat arrays + NumPy twins
    data       trees, vocabulary, batch flattening, word vectors
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

__all__ = [
    "PhraseLabels",
    "StopRequest",
    "TrainConfig",
    "TrainingRun",
    "TreeModel",
    "evaluate",
    "load_model",
    "resume",
    "train",
]

if TYPE_CHECKING:
    from rntn_engine.api import PhraseLabels, TrainingRun, TreeModel, evaluate, load_model, resume, train
    from rntn_engine.run.run_config import TrainConfig
    from rntn_engine.run.stop_signals import StopRequest


def __getattr__(name: str) -> Any:
    # imported on first use, so `import rntn_engine` (and every `rntn` command) stays light
    if name in ("TrainConfig",):
        from rntn_engine.run import run_config

        return getattr(run_config, name)
    if name in ("StopRequest",):
        from rntn_engine.run import stop_signals

        return getattr(stop_signals, name)
    if name in __all__:
        from rntn_engine import api

        return getattr(api, name)
    raise AttributeError(f"module 'rntn_engine' has no attribute {name!r}")
