"""Allow `python -m strativ.cli`, the same as the `strativ` command."""

from .app import main

main()
