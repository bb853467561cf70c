"""One module per command-line verb, each with ``add_arguments(parser)`` and ``run(args) -> int``."""
