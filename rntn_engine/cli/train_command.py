"""`rntn train`: train a model on a treebank and save it in a run directory."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer

from rntn_engine.run.run_config import TrainConfig, config_from_mapping, load_config_file

_D = TrainConfig()  # defaults, shown in --help


def train(
    train_file: Annotated[Optional[Path], typer.Option("--train-file", help="Training treebank: bracketed trees, one per line.")] = None,
    dev_file: Annotated[Optional[Path], typer.Option("--dev-file", help="Treebank scored after every epoch.")] = None,
    model: Annotated[Optional[str], typer.Option("--model", help=f"Model: rnn (matrix composition), rntn (tensor + matrix) or mvrnn (a matrix per word and phrase). [default: {_D.model}]")] = None,
    dim: Annotated[Optional[int], typer.Option("--dim", help="Size d of word and phrase vectors. [default: the --vectors file's, else 25]")] = None,
    num_classes: Annotated[Optional[int], typer.Option("--num-classes", help=f"Number of classes C; labels are 0..C-1. [default: {_D.num_classes}]")] = None,
    epochs: Annotated[Optional[int], typer.Option("--epochs", help=f"Passes over the training trees. [default: {_D.epochs}]")] = None,
    batch_size: Annotated[Optional[int], typer.Option("--batch-size", help=f"Trees per minibatch. [default: {_D.batch_size}]")] = None,
    lr: Annotated[Optional[float], typer.Option("--lr", help=f"AdaGrad learning rate. [default: {_D.lr}]")] = None,
    l2_words: Annotated[Optional[float], typer.Option("--l2-words", help=f"L2 strength on word vectors. [default: {_D.l2_words}]")] = None,
    l2_words_toward: Annotated[Optional[str], typer.Option("--l2-words-toward", help="What L2 on word vectors pulls toward: zero, or start (each vector's starting value, e.g. its pretrained one). Either way only words of the minibatch are pulled. [default: zero]")] = None,
    l2_compose: Annotated[Optional[float], typer.Option("--l2-compose", help=f"L2 strength on the composition matrix W. [default: {_D.l2_compose}]")] = None,
    l2_tensor: Annotated[Optional[float], typer.Option("--l2-tensor", help=f"L2 strength on the composition tensor V. [default: {_D.l2_tensor}]")] = None,
    l2_classifier: Annotated[Optional[float], typer.Option("--l2-classifier", help=f"L2 strength on the classifier weights. [default: {_D.l2_classifier}]")] = None,
    l2_word_matrices: Annotated[Optional[float], typer.Option("--l2-word-matrices", help=f"L2 strength on the word matrices (mvrnn). [default: {_D.l2_word_matrices}]")] = None,
    max_memory_gb: Annotated[Optional[float], typer.Option("--max-memory-gb", help=f"Refuse a model whose parameters, gradient and AdaGrad sums need more (0: no limit). [default: {_D.max_memory_gb}]")] = None,
    adagrad_eps: Annotated[Optional[float], typer.Option("--adagrad-eps", help=f"AdaGrad epsilon. [default: {_D.adagrad_eps}]")] = None,
    adagrad_reset_epochs: Annotated[Optional[int], typer.Option("--adagrad-reset-epochs", help="Forget AdaGrad's squared-gradient sums every N epochs (0: never). [default: 0]")] = None,
    min_count: Annotated[Optional[int], typer.Option("--min-count", help=f"Training count a word needs for a vector of its own; rarer words share the unknown-word vector. [default: {_D.min_count}]")] = None,
    lowercase: Annotated[Optional[bool], typer.Option("--lowercase/--keep-case", help="Fold words to lower case. [default: keep case]")] = None,
    binarise: Annotated[Optional[str], typer.Option("--binarise", help="N-ary nodes: right (right-factored), left, or strict (refuse). [default: right]")] = None,
    seed: Annotated[Optional[int], typer.Option("--seed", help=f"Seed of initialisation and of every epoch's shuffle. [default: {_D.seed}]")] = None,
    dtype: Annotated[Optional[str], typer.Option("--dtype", help=f"Arithmetic: float32 or float64. [default: {_D.dtype}]")] = None,
    threads: Annotated[Optional[int], typer.Option("--threads", help="Threads that run minibatch chunks; results do not depend on it. [default: 1]")] = None,
    grad_chunks: Annotated[Optional[int], typer.Option("--grad-chunks", help=f"Fixed number of pieces each minibatch is split into; parallelism up to this many threads. [default: {_D.grad_chunks}]")] = None,
    vectors: Annotated[Optional[Path], typer.Option("--vectors", help="Start word vectors from this file: GloVe text, word2vec text or binary, plain or gzip (detected).")] = None,
    vectors_format: Annotated[Optional[str], typer.Option("--vectors-format", help="Force the vector file format: auto, glove, word2vec-text or word2vec-binary. [default: auto]")] = None,
    vectors_encoding_errors: Annotated[Optional[str], typer.Option("--vectors-encoding-errors", help="Undecodable bytes in the vector file: strict (error with location) or replace. [default: strict]")] = None,
    freeze_vectors: Annotated[Optional[bool], typer.Option("--freeze-vectors/--train-vectors", help="Keep the (pretrained) word vectors fixed during training. [default: train them]")] = None,
    extend_vocabulary: Annotated[Optional[int], typer.Option("--extend-vocabulary", help="Add the vector file's first N words (its most frequent) to the vocabulary. [default: 0]")] = None,
    run_dir: Annotated[Optional[Path], typer.Option("--run-dir", help="Output directory. [default: checkpoints/<model>-d<dim>-seed<seed>]")] = None,
    checkpoint_every_steps: Annotated[Optional[int], typer.Option("--checkpoint-every-steps", help="Also checkpoint every N steps (0: off). [default: 0]")] = None,
    checkpoint_every_minutes: Annotated[Optional[float], typer.Option("--checkpoint-every-minutes", help=f"Also checkpoint when this many minutes passed since the last one (0: off). [default: {_D.checkpoint_every_minutes}]")] = None,
    keep_checkpoints: Annotated[Optional[int], typer.Option("--keep-checkpoints", help=f"Newest checkpoints kept; the best one is kept as well. [default: {_D.keep_checkpoints}]")] = None,
    best_metric: Annotated[Optional[str], typer.Option("--best-metric", help=f"Dev score that picks the best checkpoint: dev_fine_root or dev_fine_all. [default: {_D.best_metric}]")] = None,
    patience: Annotated[Optional[int], typer.Option("--patience", help="Stop after N evaluations without a better --best-metric (0: never). [default: 0]")] = None,
    time_limit: Annotated[Optional[str], typer.Option("--time-limit", help="Stop cleanly with a checkpoint after this much wall time, e.g. 23h, 90m, 1h30m (exit code 75, resumable); applies again to every `rntn resume` session unless changed there.")] = None,
    config_file: Annotated[Optional[Path], typer.Option("--config", help="TOML file with any of these settings (flags override it).")] = None,
    print_config: Annotated[bool, typer.Option("--print-config", help="Print the resolved configuration as TOML and exit.")] = False,
    progress: Annotated[Optional[bool], typer.Option("--progress/--no-progress", help="Progress bar. [default: only on a terminal]")] = None,
) -> None:
    """Train an RNN, RNTN or MV-RNN on a phrase-labelled treebank in a new run directory.

    Prints per-epoch loss and dev accuracy; checkpoints by time, steps and epoch. SIGTERM,
    SIGINT or --time-limit stop it at the next minibatch with a checkpoint and exit code 75;
    `rntn resume RUN_DIR` continues exactly where it stopped.
    """
    from rntn_engine.run.trainer import start_training

    config = TrainConfig()
    if config_file is not None:
        config = config_from_mapping(load_config_file(config_file), config, source=str(config_file))
    flags = {
        "train_file": train_file, "dev_file": dev_file, "model": model, "dim": dim, "num_classes": num_classes,
        "epochs": epochs, "batch_size": batch_size, "lr": lr, "l2_words": l2_words, "l2_words_toward": l2_words_toward, "l2_compose": l2_compose,
        "l2_tensor": l2_tensor, "l2_classifier": l2_classifier, "l2_word_matrices": l2_word_matrices,
        "max_memory_gb": max_memory_gb, "adagrad_eps": adagrad_eps,
        "adagrad_reset_epochs": adagrad_reset_epochs, "min_count": min_count, "lowercase": lowercase,
        "binarise": binarise, "seed": seed, "dtype": dtype, "threads": threads, "grad_chunks": grad_chunks,
        "run_dir": run_dir, "checkpoint_every_steps": checkpoint_every_steps,
        "checkpoint_every_minutes": checkpoint_every_minutes, "keep_checkpoints": keep_checkpoints,
        "best_metric": best_metric, "patience": patience, "time_limit": time_limit, "vectors_file": vectors,
        "vectors_format": vectors_format, "vectors_encoding_errors": vectors_encoding_errors,
        "freeze_vectors": freeze_vectors, "extend_vocabulary": extend_vocabulary,
    }
    given = {k: (str(v) if isinstance(v, Path) else v) for k, v in flags.items() if v is not None}
    config = config_from_mapping(given, config)
    if print_config:
        config.validate(require_data=False)
        typer.echo(config.to_toml(), nl=False)
        return
    config.validate()
    code = start_training(config, echo=typer.echo, show_progress=progress)
    if code:
        raise typer.Exit(code)
