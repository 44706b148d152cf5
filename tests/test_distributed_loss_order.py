"""The ranks' evaluation losses are summed in piece order, as one process sums them (run/distributed_evaluation.py,
merge_tallies), whatever rank scored which piece. The values are chosen so that another order gives
another float: 1.0 + 1e16 loses the 1.0 (float64 has 53 bits), 1e16 - 1e16 does not."""

from __future__ import annotations

from rntn_engine.run.distributed_evaluation import merge_tallies
from rntn_engine.run.scores import LabelScheme


def piece(index, chunk_losses, slice_losses):
    return [index, chunk_losses, slice_losses]


def test_losses_are_summed_in_piece_order_not_rank_order():
    # piece 0 and 2 scored by rank 0, piece 1 by rank 1; one slice
    rank0 = {"counts": {}, "slices": [{}], "piece_losses": [piece(0, [1.0], [1.0]), piece(2, [-1e16], [-1e16])]}
    rank1 = {"counts": {}, "slices": [{}], "piece_losses": [piece(1, [1e16], [1e16])]}
    one_process_whole = ((0.0 + 1.0) + 1e16) + -1e16  # = 0.0: the 1.0 is lost
    one_process_slice = ((0.0 + 1.0) + 1e16) + -1e16  # = 0.0
    for parts in ([rank0, rank1], [rank1, rank0]):
        tally = merge_tallies(LabelScheme.for_classes(5), 1, parts)
        assert tally.counts.loss_sum == one_process_whole == 0.0
        assert tally.slices[0].loss_sum == one_process_slice == 0.0
    # the same pieces in reverse order would give 1.0: the test tells the orders apart
    assert ((0.0 + -1e16) + 1e16) + 1.0 == 1.0
