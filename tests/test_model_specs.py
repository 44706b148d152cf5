"""The model specifications (model/model_spec.py and one module per model) are the one place
that says what a model is: the facts derived from them agree, and their memory estimate
counts exactly what their buffers hold."""

from dataclasses import fields

import pytest

from random_trees import engine_case
from rntn_engine.model.model_registry import MODEL_SPECS, MODELS, model_spec
from rntn_engine.model.model_spec import MIN_ROWS
from rntn_engine.model.objective import L2Strengths, TreeModelObjective
from rntn_engine.model.parameters import L2_GROUPS, MODEL_PARAMETERS, PARAMETERS, Gradient, ModelShape
import dataclasses

from rntn_engine.run.run_config import TrainConfig, info_of


def setting_of(name):
    return info_of(next(f for f in dataclasses.fields(TrainConfig) if f.name == name))


def test_every_l2_group_is_declared_once_and_used():
    used = {spec.l2_group for spec in PARAMETERS.values() if spec.l2_group is not None}
    assert used == set(L2_GROUPS) == {f.name for f in fields(L2Strengths)}
    for name, group in L2_GROUPS.items():  # the training setting comes from the same declaration
        assert getattr(L2Strengths(), name) == group.default == getattr(TrainConfig(), f"l2_{name}")
        assert setting_of(f"l2_{name}").help == group.help


def test_the_models_and_their_parameters_come_from_the_registry():
    assert MODELS == tuple(MODEL_SPECS) == ("rnn", "rntn", "mvrnn")
    for name, spec in MODEL_SPECS.items():
        assert spec.name == name and MODEL_PARAMETERS[name] == spec.parameters
        assert set(spec.parameters) <= set(PARAMETERS)
        assert set(spec.reduced_from_layout) <= set(spec.parameters)
    with pytest.raises(ValueError, match="unknown model 'lstm': expected one of rnn, rntn, mvrnn"):
        model_spec("lstm")
    assert setting_of("model").choices == MODELS


def test_an_activation_buffer_with_a_misspelt_name_is_refused():
    acts = model_spec("rntn")(ModelShape("rntn", 5, 3, 5, "float64")).new_activations()
    with pytest.raises(AttributeError, match="has no activation buffer 'Qx'"):
        acts.resize({"Qx": (4, 4)})
    with pytest.raises(AttributeError):  # a dataclass with declared fields: no new attribute by accident
        acts.resize({"PM": (4, 4)})


@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("backward", [True, False])
def test_the_memory_estimate_counts_what_the_buffers_hold(model, backward):
    params, _, chunks, full, _ = engine_case(model, "float64", dim=4, grad_chunks=1)
    objective = TreeModelObjective(params)
    if backward:
        objective.loss_and_gradient(params, Gradient(params.shape), [full])
    else:
        objective.forward(params, full)
    acts = objective._activations[0]
    classifier = {"Y", "S", "dS"}  # the shared classifier's buffers; the rest are the composition's
    held = sum(getattr(acts, f.name).size for f in fields(acts)
               if f.name not in classifier | {"dtype", "_store"} and getattr(acts, f.name) is not None)
    assert full.n_nodes > MIN_ROWS  # the views are the batch's size, not the buffers' minimum
    assert held == objective.model.activation_numbers(full.n_nodes, full.n_internal, backward)
