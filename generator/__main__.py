"""Allow `python -m generator` as an alias of the `kinetab` console script."""

from generator.cli import main

main()
