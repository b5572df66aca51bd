"""Workflow layer: the command line and (later) workflow files and runs.

The ``nstress`` console command is :func:`nstress.workflow.cli.main`.
"""

from nstress.workflow.cli import COMMANDS, Command, main, register

__all__ = ["COMMANDS", "Command", "main", "register"]
