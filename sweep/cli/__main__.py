"""`python -m sweep.cli`: the same as the `volsweep` command."""

from sweep.cli import main

main()
