"""Subcommands of the ``emsource`` command line, one module each.

A command module defines ``register(subparsers)``, which adds its parser and sets
``run=<function(args) -> int>`` as the parser default. :mod:`emsource.cli` finds every module
in this package by itself, so adding a command means adding a file here and nothing else.

Exit codes, the same for every command so that scripts can rely on them:
"""

EXIT_OK = 0  #: the work was done and every check passed
EXIT_CHECK_FAILED = 1  #: the work was done but a physics check failed (a diagnostic's verdict)
EXIT_USAGE = 2  #: the command line was wrong (argparse's own code)
EXIT_BAD_INPUT = 3  #: an input file, dataset, mapping or value was missing or invalid
EXIT_OUTPUT_ERROR = 4  #: an output could not be written (exists without --force, unwritable)
EXIT_INTERRUPTED = 130  #: stopped by Ctrl-C (SIGINT, 128 + 2); no partial output is left behind
EXIT_SIGNAL_BASE = 128  #: stopped by SIGTERM or SIGHUP: 128 + the signal number (143, 129);
#: no partial output is left behind. SIGKILL cannot be caught: it may leave a hidden
#: ``.<output>.<random>.partial`` file beside the output (never a half-written output);
#: ``find DIR -name '.*.partial'`` lists them.
