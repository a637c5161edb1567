"""``python -m sweep.cli`` runs the command line (the same as the ``sweep`` script)."""

from sweep.cli import main

main()
