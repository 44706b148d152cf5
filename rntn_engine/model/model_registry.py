"""The composition models, by their --model name: one line per model.

A model is one module holding a model_spec.ModelSpec subclass; registering it here makes it a
choice of ``--model`` and of ``rntn gradcheck``, gives it a checkpoint layout, L2 groups, a
memory estimate and a place in the test parametrisation (DEVELOPERS.md, "Adding a model").
"""

from __future__ import annotations

from rntn_engine.model.model_spec import ModelSpec
from rntn_engine.model.mvrnn_model import MatrixVectorNetwork
from rntn_engine.model.rnn_model import RecursiveNetwork
from rntn_engine.model.rntn_model import TensorNetwork

MODEL_SPECS: dict[str, type[ModelSpec]] = {spec.name: spec for spec in (
    RecursiveNetwork,
    TensorNetwork,
    MatrixVectorNetwork,
)}
MODELS = tuple(MODEL_SPECS)


def model_spec(name: str) -> type[ModelSpec]:
    """The specification class of model ``name``; ValueError naming the choices if unknown."""
    spec = MODEL_SPECS.get(name)
    if spec is None:
        raise ValueError(f"unknown model {name!r}: expected one of {', '.join(MODELS)}")
    return spec
