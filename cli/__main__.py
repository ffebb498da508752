"""`python -m iqdemod_cli`: the same command line as the installed `iqdemod` script."""

from .main import main

main(prog_name="iqdemod")
