"""``python -m catcheck``: the same as the ``catcheck`` command."""

from catcheck.cli import main

main()
