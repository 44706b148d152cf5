"""rntn_engine: train and apply recursive tree models (RNN, MV-RNN, RNTN) on CPUs.

Layers (imports point down only)::

    cli      typer app: parses options, prints, exits with clear codes
    run      run directory, training loop, evaluation
    model    parameters, objective (loss + gradient), optimiser
    kernels  numba forward/backward kernels on flat arrays + NumPy twins
    data     trees, vocabulary, batch flattening, word vectors
"""

__version__ = "0.1.0"
