"""One module per `topdrift` subcommand: add_parser(subparsers) and run(args)."""
