"""The kernels allocate nothing per node: numba's own allocation counter (NRT statistics)
shows the same number of allocations for a step over 2 trees as over 10 trees of
varied height. Runs in a subprocess because NUMBA_NRT_STATS must be set before numba loads.
"""

import ast
import os
import subprocess
import sys
from pathlib import Path

from rntn_engine.model.model_registry import MODELS

PROBE = """
import numpy as np
from numba.core.runtime import rtsys
from random_trees import engine_case
from rntn_engine.model.objective import TreeModelObjective, split_into_chunks
params, bank, chunks, full, _ = engine_case("{model}", "float64", dim=4)
objective = TreeModelObjective(params)
from rntn_engine.model.parameters import Gradient
grads = Gradient(params.shape)
counts = []
for n in (2, 6, 10):
    batch = split_into_chunks(bank, np.arange(n), 1)
    objective.loss_and_gradient(params, grads, batch)  # grow the workspaces first
    before = rtsys.get_allocation_stats().alloc
    objective.loss_and_gradient(params, grads, batch)
    counts.append((batch[0].n_nodes, len(batch[0].level_start), rtsys.get_allocation_stats().alloc - before))
print(counts)
"""


def run_probe(model):
    env = dict(os.environ, NUMBA_NRT_STATS="1", PYTHONPATH=str(Path(__file__).parent))
    out = subprocess.run([sys.executable, "-c", PROBE.format(model=model)], env=env, capture_output=True,
                         text=True, check=True)
    return ast.literal_eval(out.stdout.strip().splitlines()[-1])


def test_allocations_do_not_grow_with_nodes_or_levels():
    for model in MODELS:
        counts = run_probe(model)
        nodes = [c[0] for c in counts]
        assert nodes[0] < nodes[1] < nodes[2], counts
        assert len({c[2] for c in counts}) == 1, f"{model}: allocations differ with batch size: {counts}"
