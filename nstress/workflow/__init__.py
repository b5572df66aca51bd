"""Workflow layer: one fit (pipeline), workflow files (config), runs of units (run), the CLI.

The ``nstress`` console command is :func:`nstress.workflow.cli.main`.
"""

from nstress.workflow.cli import COMMANDS, Command, main, register

__all__ = ["COMMANDS", "Command", "main", "register"]
