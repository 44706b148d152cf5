"""Errors that stop a run, each with a message that says what to do (no heavy imports here)."""


class TrainingError(RuntimeError):
    """Training cannot go on (for example the loss became NaN); the message says what to do."""


class RunDirectoryError(RuntimeError):
    """The run directory cannot be used as asked (not ours, locked, changed data...)."""
