"""Use rntn_engine from Python: load a model, label every phrase, get phrase vectors, train, evaluate.

The names here are re-exported by the package (``import rntn_engine as rn``)::

    import rntn_engine as rn

    run = rn.train(train_file="data_demo/garden_train.trees", dev_file="data_demo/garden_dev.trees",
                   dim=8, epochs=2, run_dir="checkpoints/api-demo")
    with run.model() as model:
        for result in model.predict(["The café wasn't worth the queue."]):
            print(result.root_label, result.bracketed())
        vectors = model.encode(["the fern grotto was lovely ."])      # (1, d) root vectors

An item to label is a bracketed tree (any labels in it are ignored: class numbers, ``_``,
or a parser's categories; it may span several lines) or a plain sentence, which is cut
into tokens by treebank conventions (data/sentence_tokens.py) and given a right-branching
tree, as ``rntn predict`` does (``tokenize=False``: split at the separators only). Lines and
tokens follow the treebank reader's one rule (a lone CR separates tokens; Unicode line and
paragraph separators belong to their word). Labels are the same as ``rntn predict`` and ``rntn
evaluate`` give, for any number of threads. :meth:`TreeModel.predict` warns (Python's
``warnings``, once per call, with counts) as ``rntn predict`` does when items look untokenised or
more than ``warn_unknown_share`` of their tokens are unknown words.

Training from Python: :func:`train` and :func:`resume` take the settings of ``rntn train``
as keyword arguments (or a :class:`TrainConfig`) and return a :class:`TrainingRun`. They
work from any thread. In the main thread, SIGTERM, SIGHUP and SIGINT stop a run cleanly
as on the command line; from any thread, ``stop.request("reason")`` on the
:class:`StopRequest` passed as ``stop=`` stops it at the next minibatch with a checkpoint.
Nothing global is left changed afterwards: signal handlers and the BLAS thread limit are
restored when the call returns.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Iterable, Sequence

import numpy as np

from rntn_engine.data.batches import encode_treebank, make_batch
from rntn_engine.data.bracket_tokens import SEPARATORS
from rntn_engine.data.tree import Tree
from rntn_engine.data.treebank_reader import parse_tree
from rntn_engine.data.treebank_writer import format_tree
from rntn_engine.model.objective import TreeModelObjective, split_into_chunks
from rntn_engine.run.checkpoint_evaluation import EvaluationRow, evaluate_many, expand_checkpoint_specs, mark_best
from rntn_engine.run.checkpoints import Checkpoint, load_checkpoint
from rntn_engine.run.evaluation import PREDICT_CHUNKS
from rntn_engine.run.prediction import UNKNOWN_SHARE_WARNING, PredictionSummary, sentence_tree
from rntn_engine.run.run_config import TrainConfig, config_from_mapping
from rntn_engine.run.run_directory import MODEL_FILE, list_checkpoints
from rntn_engine.run.stop_signals import StopRequest
from rntn_engine.run.trainer import resume_training, start_training

BLOCK_ITEMS = 1024  # items run through the model together


@dataclass
class PhraseLabels:
    """The predicted label of every phrase (node) of one item, in post-order (the root last)."""

    tree: Tree  # the binary tree the labels belong to (its own labels: none)
    labels: np.ndarray  # (N,) predicted class per node
    probabilities: np.ndarray  # (N, C) class probabilities per node
    from_sentence: bool  # True: the item was a plain sentence and got a right-branching tree
    unknown_words: list[str]  # words the vocabulary does not hold (they share the unknown-word vector)

    @property
    def words(self) -> tuple[str, ...]:
        return self.tree.words

    @property
    def root_label(self) -> int:
        return int(self.labels[-1])

    @property
    def root_probabilities(self) -> np.ndarray:
        return self.probabilities[-1]

    def bracketed(self) -> str:
        """The tree in bracketed form with the predicted label at every node (readable by every command)."""
        return format_tree(self.tree, self.labels)

    def phrases(self) -> list[tuple[str, int, np.ndarray]]:
        """(text, label, probabilities) of every node, in post-order."""
        spans = self.tree.spans()
        return [(" ".join(self.tree.words[a:z]), int(self.labels[i]), self.probabilities[i])
                for i, (a, z) in enumerate(spans.tolist())]


class TreeModel:
    """A trained model loaded from a model file or checkpoint: label phrases, encode them.

    Use it as a context manager (or call :meth:`close`): it holds worker threads and a BLAS
    thread limit while it is open.
    """

    def __init__(self, checkpoint: Checkpoint, threads: int = 1) -> None:
        self.checkpoint = checkpoint
        self.path = Path(checkpoint.path)
        self._objective: TreeModelObjective | None = TreeModelObjective(checkpoint.params, threads=threads)

    @property
    def config(self) -> TrainConfig:
        return self.checkpoint.config

    @property
    def vocabulary(self) -> list[str]:
        """Word of each row of the word vectors (row 0: the unknown word)."""
        return list(self.checkpoint.vocabulary.words)

    @property
    def num_classes(self) -> int:
        return self.checkpoint.config.num_classes

    def close(self) -> None:
        if self._objective is not None:
            self._objective.close()
            self._objective = None

    def __enter__(self) -> "TreeModel":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def trees(self, items: Iterable[str | Tree], tokenize: bool = True) -> list[Tree]:
        """The tree of each item (module docstring); a :class:`Tree` passes through."""
        trees = []
        for k, item in enumerate(items):
            if isinstance(item, Tree):
                trees.append(item)
            elif _is_tree_text(item):
                text = " ".join(item.split("\n"))  # a tree over several lines: its line breaks are spaces
                trees.append(parse_tree(text, path="<item>", line=k + 1, binarise=self.config.binarise,
                                        ignore_labels=True))
            else:
                body = item.replace("\n", " ").strip(SEPARATORS)
                if not body:
                    raise ValueError(f"item {k + 1} is empty: expected a bracketed tree or a sentence")
                trees.append(sentence_tree(body, "<item>", k + 1, tokenize))
        return trees

    def predict(self, items: Sequence[str | Tree], tokenize: bool = True,
                warn_unknown_share: float = UNKNOWN_SHARE_WARNING) -> list[PhraseLabels]:
        """Label every phrase of every item (bracketed trees or plain sentences).

        Warns (``UserWarning``, once per call, with counts) when items look untokenised or more than
        ``warn_unknown_share`` of the tokens are unknown words, as ``rntn predict`` does.
        """
        objective = self._open_objective()
        results: list[PhraseLabels] = []
        summary = PredictionSummary()
        for a in range(0, len(items), BLOCK_ITEMS):
            block = list(items[a : a + BLOCK_ITEMS])
            trees = self.trees(block, tokenize)
            bank = encode_treebank(trees, self.checkpoint.vocabulary)
            chunks = split_into_chunks(bank, np.arange(len(trees)), PREDICT_CHUNKS)  # as `rntn predict` does
            Y = np.concatenate([y for _, y in objective.forward_chunks(self.checkpoint.params, chunks)])
            for k, tree in enumerate(trees):
                lo, hi = int(bank.start[k]), int(bank.start[k + 1])
                unknown = [w for w in tree.words if self.checkpoint.vocabulary.id_of(w) == 0]
                from_sentence = not isinstance(block[k], Tree) and not _is_tree_text(block[k])
                summary.count(tree, unknown, from_sentence, tokenize, hi - lo, a + k + 1)
                results.append(PhraseLabels(tree, np.argmax(Y[lo:hi], axis=1).astype(np.int32), Y[lo:hi].copy(),
                                            from_sentence, unknown))
        for line in summary.warnings(warn_unknown_share, option="warn_unknown_share", item="item"):
            warnings.warn(line.removeprefix("warning: "), stacklevel=2)
        return results

    def encode(self, items: Sequence[str | Tree], all_nodes: bool = False,
               tokenize: bool = True) -> np.ndarray | list[np.ndarray]:
        """Phrase vectors: (n, d) root vectors, or with ``all_nodes`` one (N_i, d) array per item (post-order).

        The same items give the same bits; an item encoded with other items can differ from the same item
        alone in the last bits (a level's matrix product has another size), never more.
        """
        objective = self._open_objective()
        roots, every = [], []
        for a in range(0, len(items), BLOCK_ITEMS):
            trees = self.trees(list(items[a : a + BLOCK_ITEMS]), tokenize)
            bank = encode_treebank(trees, self.checkpoint.vocabulary)
            _, P, _ = objective.forward(self.checkpoint.params, make_batch(bank, np.arange(len(trees))))
            roots.append(P[bank.start[1:] - 1])
            every += [P[bank.start[k] : bank.start[k + 1]] for k in range(len(trees))]
        if all_nodes:
            return every
        d = self.config.dim
        return np.concatenate(roots) if roots else np.zeros((0, d), dtype=self.checkpoint.params.flat.dtype)

    def _open_objective(self) -> TreeModelObjective:
        if self._objective is None:
            raise ValueError(f"the model {self.path} is closed")
        return self._objective


def _is_tree_text(item: str) -> bool:
    return item.lstrip(SEPARATORS + "\n").startswith("(")


def load_model(path: str | Path, threads: int = 1) -> TreeModel:
    """A model from a model file or checkpoint, or from a run directory (its model.h5, else its newest checkpoint)."""
    path = Path(path)
    if path.is_dir():
        candidates = [path / MODEL_FILE] if (path / MODEL_FILE).exists() else [c.path for c in list_checkpoints(path)][-1:]
        if not candidates:
            raise FileNotFoundError(f"{path}: holds no model file or checkpoint")
        path = candidates[0]
    return TreeModel(load_checkpoint(path), threads=threads)


@dataclass
class TrainingRun:
    """What :func:`train` or :func:`resume` leaves: a run directory, and how the call ended."""

    run_dir: Path
    exit_code: int  # 0: finished; 75: stopped cleanly (resumable); as the command's exit code

    @property
    def finished(self) -> bool:
        return self.exit_code == 0

    @property
    def stopped(self) -> bool:
        return self.exit_code == 75

    def model_path(self) -> Path:
        """model.h5 when the run finished, else its newest checkpoint."""
        if (self.run_dir / MODEL_FILE).exists():
            return self.run_dir / MODEL_FILE
        checkpoints = list_checkpoints(self.run_dir)
        if not checkpoints:
            raise FileNotFoundError(f"{self.run_dir}: holds no checkpoint yet")
        return checkpoints[-1].path

    def model(self, threads: int = 1) -> TreeModel:
        return TreeModel(load_checkpoint(self.model_path()), threads=threads)


def train(config: TrainConfig | None = None, *, stop: StopRequest | None = None,
          echo: Callable[[str], None] | None = None, progress: bool = False, **settings) -> TrainingRun:
    """Train a new run, as ``rntn train`` with the same settings (keyword arguments named like the
    TrainConfig fields, or ``config``; keywords override it). Returns when the run finishes or stops."""
    config = config_from_mapping({k: str(v) if isinstance(v, Path) else v for k, v in settings.items()},
                                 config or TrainConfig())
    config.validate()
    code = start_training(config, echo=echo or _silent, show_progress=progress, stop=stop)
    return TrainingRun(config.resolved_run_dir(), code)


def resume(run_dir: str | Path, *, stop: StopRequest | None = None, echo: Callable[[str], None] | None = None,
           progress: bool = False, allow_changed_data: bool = False, **changes) -> TrainingRun:
    """Continue a run, as ``rntn resume`` (``changes``: the settings a resume may change)."""
    run_dir = Path(run_dir)
    code = resume_training(run_dir, changes, echo=echo or _silent, show_progress=progress,
                           allow_changed_data=allow_changed_data, stop=stop)
    return TrainingRun(run_dir, code)


def evaluate(checkpoints: Sequence[str | Path], treebanks: Sequence[str | Path], jobs: int = 1,
             best_by: str = "fine_root", neutral_class: int | None = -1,
             slices: Sequence[str] = (), slice_files: Sequence[str | Path] = ()) -> list[EvaluationRow]:
    """Score checkpoints (files, glob patterns, run directories) on treebanks: the rows of ``rntn evaluate``,
    with the best row of each treebank marked. ``neutral_class``: -1 the default for the number of
    classes, None for no neutral class. ``slices`` (``"NAME=KIND[:VALUE]"`` as ``--slice``) and
    ``slice_files`` add a row per slice after each treebank's row (``row.slice`` names it)."""
    from rntn_engine.run.slice_definitions import read_slice_file, slice_from_option

    definitions = [s for f in slice_files for s in read_slice_file(f)] + [slice_from_option(s) for s in slices]
    paths = expand_checkpoint_specs([str(c) for c in checkpoints])
    rows = evaluate_many(paths, [str(t) for t in treebanks], jobs, neutral_class, slices=tuple(definitions))
    mark_best(rows, best_by)
    return rows


def _silent(line: str) -> None:
    return None
