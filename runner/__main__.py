"""`python -m runner` runs the foldwise command."""

from .cli import main

main(prog_name="foldwise")
