"""`python -m warehouse` runs the command line."""
from warehouse.cli import main

main()
