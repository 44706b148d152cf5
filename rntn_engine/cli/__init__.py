"""Command-line layer: one module per command, joined in :mod:`rntn_engine.cli.app`."""
