"""`python -m runner` runs the foldwise command."""

from .cli import command_line

command_line()
