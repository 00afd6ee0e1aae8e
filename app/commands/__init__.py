"""One module per CLI command, each with ``add_arguments(parser)`` and ``run(args) -> int``."""
