"""`rntn gradcheck`: compare the hand-written gradients with central finite differences."""

from __future__ import annotations

from typing import Annotated

import typer

from rntn_engine.cli.app_exit import EXIT_CHECK_FAILED


def gradcheck(
    model: Annotated[str, typer.Option("--model", help="Model to check: rnn, rntn or mvrnn.")] = "rntn",
    dim: Annotated[int, typer.Option("--dim", min=1, max=16, help="Vector size d of the random model.")] = 4,
    trees: Annotated[int, typer.Option("--trees", min=1, max=100, help="Number of random trees.")] = 8,
    max_words: Annotated[int, typer.Option("--max-words", min=1, max=40, help="Longest random sentence.")] = 7,
    num_classes: Annotated[int, typer.Option("--num-classes", min=2, help="Number of classes.")] = 5,
    seed: Annotated[int, typer.Option("--seed", help="Seed of the random trees and parameters.")] = 0,
    threshold: Annotated[float, typer.Option("--threshold", help="Largest acceptable relative error.")] = 1e-6,
) -> None:
    """Check every gradient group against central finite differences in float64 on random trees.

    Prints the largest relative error per parameter group and exits 1 when any is above --threshold
    or is not a number (NaN).
    Run it after touching a kernel.
    """
    import numpy as np

    from rntn_engine.data.batches import encode_treebank
    from rntn_engine.data.synthetic_trees import random_binary_tree
    from rntn_engine.data.vocabulary import build_vocabulary
    from rntn_engine.model.gradient_check import finite_difference_errors
    from rntn_engine.model.objective import L2Strengths, TreeModelObjective, split_into_chunks
    from rntn_engine.model.parameters import MODELS, ModelShape, init_parameters

    if model not in MODELS:
        raise typer.BadParameter(f"expected one of {', '.join(MODELS)}", param_hint="--model")
    rng = np.random.default_rng(seed)
    words = [f"w{i}" for i in range(12)]
    sample = [random_binary_tree(rng, int(rng.integers(1, max_words + 1)), num_classes, words, p_unlabelled=0.2)
              for _ in range(trees)]
    vocabulary = build_vocabulary(sample, min_count=1)
    bank = encode_treebank(sample, vocabulary)
    shape = ModelShape(model, len(vocabulary), dim, num_classes, "float64")
    params = init_parameters(shape, rng)
    params.flat *= 2.0  # leave tanh's linear range, so curvature terms are exercised
    params.b[:] = rng.uniform(-0.5, 0.5, dim)
    objective = TreeModelObjective(params, L2Strengths(1e-3, 1e-3, 1e-3, 1e-3, word_matrices=1e-3))
    chunks = split_into_chunks(bank, np.arange(bank.n_trees), 2)
    errors = finite_difference_errors(objective, params, chunks)
    typer.echo(f"gradient check: {model}, d={dim}, {trees} random trees ({bank.n_nodes} nodes), float64, "
               f"central differences h=1e-6")
    typer.echo(f"{'parameter':<10} {'size':>8} {'max relative error':>20}  verdict")
    failed = []
    for name, err in errors.items():
        ok = err <= threshold  # False for NaN as well: a NaN error is a failure, never a pass
        if not ok:
            failed.append(name)
        typer.echo(f"{name:<10} {params[name].size:>8} {err:>20.3e}  {'ok' if ok else 'FAILED'}")
    if failed:
        shown = ", ".join(f"{name} {errors[name]:.3e}" for name in failed)
        typer.echo(f"gradient check failed: relative error above threshold {threshold:.1e} or not a number: "
                   f"{shown}", err=True)
        raise typer.Exit(EXIT_CHECK_FAILED)
    typer.echo(f"all gradients within {threshold:.1e}")
