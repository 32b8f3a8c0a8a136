"""``python -m lapbalance``: the command-line interface (same as the ``lapbalance`` script)."""

from lapbalance.cli import main

main(prog_name="lapbalance")
