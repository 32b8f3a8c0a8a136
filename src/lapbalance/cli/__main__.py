"""Allow ``python -m lapbalance.cli``."""

from lapbalance.cli import main

main()
