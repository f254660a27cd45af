"""One module per command-line subcommand; each defines add_parser(subparsers) and run(args) -> int."""
