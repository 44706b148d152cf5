"""Exit codes of the ``rntn`` command (documented in README)."""

EXIT_OK = 0  # success
EXIT_BAD_INPUT = 1  # bad input file or failed training: one line on stderr, FILE:LINE:COL where it applies
EXIT_CHECK_FAILED = 1  # a self-check (gradcheck) found an error above its threshold
EXIT_USAGE = 2  # bad usage: unknown option, missing argument, invalid value
EXIT_STOPPED_RESUMABLE = 75  # training stopped by SIGTERM/SIGINT/--time-limit with a checkpoint
EXIT_INTERRUPTED = 130  # interrupted by the user
