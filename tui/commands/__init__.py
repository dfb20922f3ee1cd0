"""One module per `bandwatch` subcommand (see `tui/cli.py`)."""
