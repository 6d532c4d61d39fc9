"""CLI command modules; each defines register(subparsers). Listed in benchlab.cli.COMMAND_MODULES."""
