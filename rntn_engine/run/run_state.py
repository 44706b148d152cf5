"""Where a run is: the position and counters saved in every checkpoint, checked when read back.

Together with the parameters and AdaGrad sums, these fields decide the future of a run
(the epoch's order is rebuilt from the seed and the epoch number, so no generator state
is needed). A checkpoint's stored state is validated field by field on load
(:meth:`RunState.from_record`): a wrong type, a value out of range, a missing or an
unknown field makes the checkpoint invalid rather than a traceback or a silent restart.
"""

from __future__ import annotations

import dataclasses
import math
import re
from dataclasses import dataclass

FINISH_REASONS = ("", "all epochs done", "early stopping")
_CHECKPOINT_NAME = re.compile(r"^checkpoint-step\d{9,}\.h5$")


@dataclass
class RunState:
    """Where a run is. Saved in every checkpoint and restored at one point before the training loop;
    each field changes what a resumed run does later (tests/test_checkpoint_fields_matter.py changes
    each one and watches that outcome):

        step, epoch, position    which trees come next; the steps checkpoints and records carry
        epoch_loss, epoch_labelled_nodes, epoch_l2
                                 the train_loss (cross-entropy per labelled node) and train_l2
                                 recorded at the end of the epoch
        best_value               whether a later evaluation counts as an improvement
        best_checkpoint          which checkpoint pruning keeps besides the newest ones
                                 (its name holds the step of the best evaluation)
        evaluations_without_improvement   when early stopping ends the run
        finished, finish_reason  whether a resume trains at all; only "all epochs done" goes on
                                 when more --epochs are asked for
        class_weights            the weight of each class in the training loss, resolved from the
                                 class_weights setting when the run started (empty: all 1)
        training_seconds         kept although it decides no number of training: the
                                 wall_seconds of every later metrics record count from it, so
                                 the time of all invocations adds up
    """

    step: int = 0  # minibatch updates done
    epoch: int = 0  # current epoch, 0-based (= epochs completed when position is 0)
    position: int = 0  # trees of the current epoch already trained on
    epoch_loss: float = 0.0  # cross-entropy summed over this epoch's labelled nodes, so far
    epoch_labelled_nodes: int = 0  # labelled nodes of this epoch's minibatches, so far
    epoch_l2: float = 0.0  # sum over this epoch's minibatches of the L2 term x trees, so far
    best_value: float | None = None  # best value of best_metric so far
    best_checkpoint: str = ""  # file name of the best checkpoint
    evaluations_without_improvement: int = 0  # for early stopping
    finished: bool = False  # the run is complete (all epochs, or stopped early)
    finish_reason: str = ""  # "all epochs done" or "early stopping"
    training_seconds: float = 0.0  # wall time spent training, all invocations together
    class_weights: list = dataclasses.field(default_factory=list)  # (C,) weights of the training loss; []: all 1

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)

    @classmethod
    def from_record(cls, record: object) -> "RunState":
        """The state stored in a checkpoint, checked field by field; ValueError says what is wrong."""
        if not isinstance(record, dict):
            raise ValueError(f"run state must be a JSON object, got {type(record).__name__}")
        known = {f.name for f in dataclasses.fields(cls)}
        record = {"class_weights": [], **record}  # checkpoints written before class weights existed: all 1
        missing = sorted(known - set(record))
        unknown = sorted(set(record) - known)
        if missing or unknown:
            raise ValueError(f"run state {'lacks ' + ', '.join(missing) if missing else ''}"
                             f"{'; ' if missing and unknown else ''}"
                             f"{'has unknown fields ' + ', '.join(unknown) if unknown else ''}")
        state = cls(**record)
        for name in ("step", "epoch", "position", "evaluations_without_improvement", "epoch_labelled_nodes"):
            _count(name, getattr(state, name))
        _number("epoch_loss", state.epoch_loss)
        _number("epoch_l2", state.epoch_l2)
        _number("training_seconds", state.training_seconds, minimum=0.0)
        if state.best_value is not None:
            _number("best_value", state.best_value)
        if not isinstance(state.best_checkpoint, str) or (state.best_checkpoint and
                                                          not _CHECKPOINT_NAME.match(state.best_checkpoint)):
            raise ValueError(f"run state best_checkpoint {state.best_checkpoint!r} is not a checkpoint file name")
        if not isinstance(state.finished, bool):
            raise ValueError(f"run state finished must be true or false, got {state.finished!r}")
        if not isinstance(state.class_weights, list) or not all(
                isinstance(w, (int, float)) and not isinstance(w, bool) and math.isfinite(w) and w >= 0
                for w in state.class_weights):
            raise ValueError(f"run state class_weights must be a list of finite numbers >= 0, "
                             f"got {state.class_weights!r}")
        if state.finish_reason not in FINISH_REASONS:
            raise ValueError(f"run state finish_reason {state.finish_reason!r} is not one of {FINISH_REASONS}")
        return state


def _count(name: str, value: object) -> None:
    if not isinstance(value, int) or isinstance(value, bool) or value < 0:
        raise ValueError(f"run state {name} must be a whole number >= 0, got {value!r}")


def _number(name: str, value: object, minimum: float | None = None) -> None:
    if not isinstance(value, (int, float)) or isinstance(value, bool) or not math.isfinite(value):
        raise ValueError(f"run state {name} must be a finite number, got {value!r}")
    if minimum is not None and value < minimum:
        raise ValueError(f"run state {name} must be at least {minimum}, got {value!r}")
