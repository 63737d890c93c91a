"""Subcommands: one module each, registered in loopwarden.cli.COMMANDS."""
