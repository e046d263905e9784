"""Kept for the ``seqtest`` command of this release, which imports
``service.commands.add_subcommands``; the subcommands live in :mod:`service.cli`.
Remove once the ``seqtest`` command finds them through its entry point."""

from service.cli import register as add_subcommands

__all__ = ["add_subcommands"]
