"""Subcommands of the ``benchkit`` CLI, one module each."""
