"""The vector models' compiled chunk gradient (kernels/chunk_gradient.py) and numba's threads.

The compiled call must give the bits of the chunk-by-chunk path it replaces (forward, classifier,
backward and word rows called one by one from Python: the path the MV-RNN still takes, and the one
the gradient proofs were written against), on one thread, on numba's threads (jit_setup.py,
"numba's threads") and on the Python worker threads used when no spinning threading layer loads.
"""

import os
import subprocess
import sys

import numpy as np
import pytest

from random_trees import engine_case

import rntn_engine.model.part_threads as part_threads
from rntn_engine.jit_setup import compiled_threads
from rntn_engine.model.model_spec import ModelSpec
from rntn_engine.model.objective import L2Strengths, TreeModelObjective
from rntn_engine.model.parameters import Gradient
from rntn_engine.model.rnn_model import RecursiveNetwork


def gradient_of(model, dtype, threads, dim=5, chunks=3):
    params, _, batches, _, _ = engine_case(model, dtype, dim=dim, grad_chunks=chunks, seed=3)
    objective = TreeModelObjective(params, L2Strengths(1e-3, 1e-3, 1e-3, 1e-3, 1e-3), threads=threads,
                                   class_weights=np.array([1.0, 2.0, 0.5, 1.0, 3.0]))
    kernel_threads = objective._threads.kernel_threads
    grads = Gradient(params.shape)
    objective.loss_and_gradient(params, grads, batches[::-1])  # a first step leaves its buffers dirty
    loss = objective.loss_and_gradient(params, grads, batches)
    objective.close()
    rows = {name: (r.rows.copy(), r.values.copy()) for name, r in grads.rows.items()}
    return loss, grads.flat.copy(), rows, kernel_threads


def assert_same_bits(a, b):
    assert a[0] == b[0]
    assert np.array_equal(a[1], b[1])
    assert a[2].keys() == b[2].keys()
    for name in a[2]:
        assert np.array_equal(a[2][name][0], b[2][name][0]) and np.array_equal(a[2][name][1], b[2][name][1])


@pytest.mark.parametrize("model", ["rnn", "rntn"])
@pytest.mark.parametrize("dtype", ["float32", "float64"])
def test_compiled_chunk_gradient_equals_the_chunk_by_chunk_path(model, dtype, monkeypatch):
    compiled = gradient_of(model, dtype, threads=1)
    monkeypatch.setattr(RecursiveNetwork, "gradient_chunks", ModelSpec.gradient_chunks)  # the Python path
    assert_same_bits(compiled, gradient_of(model, dtype, threads=1))


@pytest.mark.parametrize("model", ["rnn", "rntn"])
def test_numba_threads_and_python_threads_give_the_bits_of_one_thread(model, monkeypatch):
    one = gradient_of(model, "float64", threads=1)
    numba_threads = gradient_of(model, "float64", threads=2)
    if compiled_threads() is not None:
        assert numba_threads[3] == 2  # the step's parts did go to numba's threads
    monkeypatch.setattr(part_threads, "compiled_threads", lambda: None)  # as on a machine without the layers
    python_threads = gradient_of(model, "float64", threads=2)
    assert python_threads[3] == 0
    assert_same_bits(one, numba_threads)
    assert_same_bits(one, python_threads)


def test_large_tensor_parts_on_numba_threads_and_python_threads_agree(monkeypatch):
    # d = 41: the tensor's layout, its gradient's fold and V's AdaGrad step are cut into ranges
    from rntn_engine.model.adagrad import AdaGrad

    def trained(threads):
        params, _, batches, _, _ = engine_case("rntn", "float64", dim=41, grad_chunks=2, seed=1)
        objective = TreeModelObjective(params, threads=threads)
        optimiser = AdaGrad(params, 0.05, threads=threads)
        grads = Gradient(params.shape)
        for _ in range(2):
            objective.loss_and_gradient(params, grads, batches, include_l2=False)
            optimiser.step_with_l2(params, grads, objective.l2)
        objective.close()
        optimiser.close()
        return params.flat.copy(), optimiser.sums.flat.copy()

    one, two = trained(1), trained(2)
    monkeypatch.setattr(part_threads, "compiled_threads", lambda: None)
    python_two = trained(2)
    for other in (two, python_two):
        assert np.array_equal(one[0], other[0]) and np.array_equal(one[1], other[1])


def omp_loads():
    try:
        import numba.np.ufunc.omppool  # noqa: F401
    except Exception:
        return False
    return True


@pytest.mark.parametrize("requested", ["workqueue", "omp"])
def test_the_users_threading_layer_is_kept(requested):
    # NUMBA_THREADING_LAYER naming a layer that does not spin turns the threaded kernels off; naming a
    # spinning one selects it when its library loads
    code = "from rntn_engine.jit_setup import compiled_threads; print(compiled_threads())"
    env = dict(os.environ, NUMBA_THREADING_LAYER=requested)
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, check=True).stdout
    expected = "omp" if requested == "omp" and omp_loads() else "None"
    assert out.strip() == expected
