"""The MV-RNN's parameter layout and initialisation, and the memory guard (model/parameters.py)."""

import numpy as np
import pytest

from rntn_engine.model.parameters import (
    Gradient,
    L2_GROUP,
    MemoryLimitError,
    ModelShape,
    check_memory,
    init_parameters,
    parameter_shapes,
)


def test_mvrnn_layout_and_l2_groups():
    shapes = parameter_shapes("mvrnn", vocab_size=7, dim=3, num_classes=5)
    assert shapes == {"L": (7, 3), "W": (3, 6), "b": (3,), "LM": (7, 3, 3), "WM": (3, 6), "Ws": (5, 3), "bs": (5,)}
    assert L2_GROUP["LM"] == "word_matrices" and L2_GROUP["WM"] == L2_GROUP["W"] == "compose"
    assert ModelShape("mvrnn", 7, 3, 5, "float64").count() == 7 * 3 + 18 + 3 + 7 * 9 + 18 + 15 + 5


@pytest.mark.parametrize("dtype", ["float32", "float64"])
def test_mvrnn_initialisation_follows_the_documented_rule(dtype):
    d = 6
    mv = init_parameters(ModelShape("mvrnn", 11, d, 5, dtype), np.random.default_rng(3))
    rnn = init_parameters(ModelShape("rnn", 11, d, 5, dtype), np.random.default_rng(3))
    # the MV-RNN draws its own arrays after all others: the arrays it shares with the RNN are the RNN's
    for name in rnn.names():
        assert np.array_equal(mv[name], rnn[name]), name
    noise = mv.LM.astype(np.float64) - np.eye(d)
    assert np.abs(noise).max() <= 0.01 + 1e-6 and np.abs(noise).max() > 0.005
    assert not np.array_equal(mv.LM[1], mv.LM[2])  # every word its own draw
    r = 1.0 / np.sqrt(2 * d)
    wm_noise = mv.WM.astype(np.float64) - 0.5 * np.hstack([np.eye(d), np.eye(d)])
    assert np.abs(wm_noise).max() <= r + 1e-6 and np.abs(wm_noise).max() > r / 2


def test_word_matrices_drawn_in_blocks_equal_one_draw():
    # LM is drawn a block of words at a time (to bound temporaries); the stream is that of one draw
    d, vocab = 200, 60  # (1 << 20) // d^2 = 26 words per block: three blocks
    mv = init_parameters(ModelShape("mvrnn", vocab, d, 2, "float64"), np.random.default_rng(9))
    rng = np.random.default_rng(9)
    init_parameters(ModelShape("rnn", vocab, d, 2, "float64"), rng)  # consume the shared draws
    assert np.array_equal(mv.LM, np.eye(d) + rng.uniform(-0.01, 0.01, size=(vocab, d, d)))


def test_memory_estimate_counts_parameters_adagrad_sums_and_the_dense_gradient():
    # counted by hand from the layout: |V| d + |V| d^2 + 2 d^2 (W) + d + 2 d^2 (WM) + C d + C, two copies
    # (parameters, AdaGrad sums), plus the gradient of everything but the word arrays (their gradient is
    # the minibatch's rows only), plus one more copy of L when L2 pulls word vectors toward their start
    V, d, C = 100_000, 25, 5
    dense = 2 * d * d + d + 2 * d * d + C * d + C
    count = V * d + V * d * d + dense
    shape = ModelShape("mvrnn", V, d, C, "float32")
    assert check_memory(shape, 0) == 4 * (2 * count + dense)  # 0: no limit
    assert check_memory(shape, 4 * (2 * count + dense)) == 4 * (2 * count + dense)  # at the limit: allowed
    assert check_memory(shape, 0, anchored_words=True) == 4 * (2 * count + dense + V * d)


def test_memory_guard_refuses_with_the_estimate_and_what_to_change():
    shape = ModelShape("mvrnn", 100_000, 50, 5, "float32")  # 255,010,305 parameters, 10,305 outside L and LM
    with pytest.raises(MemoryLimitError) as caught:
        check_memory(shape, 1.5 * 2**30)
    message = str(caught.value)
    assert isinstance(caught.value, ValueError)
    # 4 x (2 x 255,010,305 + 10,305) = 2,040,123,660 bytes = 1.90 GiB
    assert "2,040,123,660" not in message and "1.90 GiB" in message
    assert "1.50 GiB" in message and "255,010,305 float32 parameters" in message
    assert "98% of them in LM (100000, 50, 50)" in message  # 250,000,000 / 255,010,305
    for hint in ("--min-count", "--dim", "--max-memory-gb"):
        assert hint in message
    assert "\n" not in message
    small = ModelShape("rntn", 1000, 25, 5, "float64")
    assert check_memory(small, 0.5 * 2**30) == small.training_bytes()
    with pytest.raises(MemoryLimitError, match=r"495\.9 MiB .* above the limit of 256\.0 MiB"):
        check_memory(ModelShape("mvrnn", 100_000, 25, 5, "float32"), 0.25 * 2**30)  # 520,031,860 bytes


def test_l2_in_blocks_equals_one_pass_and_a_step_allocates_nothing_vocabulary_sized(monkeypatch):
    # The estimate above holds only if a training step adds no vocabulary-sized temporaries: chunks keep
    # no copy of L or LM, and the L2 term runs in blocks of L2_BLOCK numbers.
    import tracemalloc

    from random_trees import engine_case

    from rntn_engine.model import objective as objective_module
    from rntn_engine.model.objective import L2Strengths, TreeModelObjective

    _, _, chunks, _, _ = engine_case("mvrnn", "float64", dim=8)
    params = init_parameters(ModelShape("mvrnn", 4000, 8, 5, "float64"), np.random.default_rng(0))  # LM: 2 MiB
    l2 = L2Strengths(1e-2, 2e-2, 3e-2, 4e-2, 5e-2)
    one_pass = Gradient(params.shape)
    loss_one_pass = TreeModelObjective(params, l2, threads=2).loss_and_gradient(params, one_pass, chunks)
    monkeypatch.setattr(objective_module, "L2_BLOCK", 1000)
    objective = TreeModelObjective(params, l2, threads=2)
    grads = Gradient(params.shape)
    objective.loss_and_gradient(params, grads, chunks)  # first call grows the workspaces
    tracemalloc.start()
    loss = objective.loss_and_gradient(params, grads, chunks)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    objective.close()
    assert np.array_equal(grads.flat, one_pass.flat)  # elementwise: the same bits in blocks
    for name in ("L", "LM"):  # word arrays: the minibatch's rows only
        assert np.array_equal(grads.rows[name].values, one_pass.rows[name].values)
    assert loss == pytest.approx(loss_one_pass, rel=1e-14)  # only the summation order of the penalty differs
    assert peak < params.LM.nbytes / 8, f"a step allocated {peak} bytes; LM has {params.LM.nbytes}"


def test_memory_estimate_adds_the_minibatchs_activations():
    from rntn_engine.model.parameters import largest_minibatch

    # trees of 7, 3, 9, 1 nodes, batches of 2: the largest is 9 + 7 = 16 nodes, (16 - 2) / 2 = 7 internal
    assert largest_minibatch(np.array([7, 3, 9, 1]), 2) == (16, 7)
    assert largest_minibatch(np.array([7, 3]), 5) == (10, 4)
    shape = ModelShape("mvrnn", 50, 6, 5, "float64")
    alone = check_memory(shape, 0)
    # counted by hand for the MV-RNN at d = 6, D = 12, N = 16, M = 7, float64:
    #   forward  N (d + d^2) + M (D + d + d D + d^2) = 16 * 42 + 7 * 126 = 1554
    #   backward N (d + d^2) + M (d + D + d^2 + d D) = 1554
    with_batch = check_memory(shape, 0, minibatch=(16, 7))
    assert with_batch - alone == (1554 + 1554) * 8
    with pytest.raises(MemoryLimitError, match="activations"):
        check_memory(shape, alone + 8, minibatch=(16, 7))
