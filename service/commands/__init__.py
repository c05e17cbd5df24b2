"""Bodies of the `seqaudit` subcommands; service/cli.py only parses arguments."""
