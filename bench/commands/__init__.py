"""One module per `gainbench` subcommand.

Each module defines ``NAME`` (the subcommand), ``HELP`` (one line), ``configure(parser)``
(adds its arguments to an ``argparse`` sub-parser) and ``run(args) -> int`` (the exit status).
`bench.cli` lists the modules; nothing else is needed to add a command.
"""
