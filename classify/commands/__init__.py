"""One module per ``pulsesort`` subcommand.

Each module defines:

``NAME``
    the subcommand name as typed by the user;
``HELP``
    a one-line description for ``pulsesort --help``;
``add_arguments(parser)``
    adds the subcommand's options to an ``argparse`` parser;
``run(args) -> int``
    calls the public library API and returns an exit code.

Modules hold no science: they parse, call, and print. :mod:`classify.cli`
discovers them, so adding a command means adding a file here.
"""
