"""The foldwise commands outside `cli.py`, by theme, and the options they share with it;
`runner.cli` registers them on its `main` group."""
