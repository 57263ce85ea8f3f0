"""`python -m reportkit` runs the command line."""

from reportkit.cli import main

main()
