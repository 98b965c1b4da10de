"""``python -m magvault`` works like the ``magvault`` console script."""

from magvault.cli import main

main(prog_name="magvault")
