"""`python3 -m fleet ...` runs the fleet command, whether or not the console script is on PATH."""

from fleet.cli import main

main(prog_name="fleet")
