"""Allow `python -m strativ.cli`, the same as the `strativ` command."""

from .entry import main

main()
