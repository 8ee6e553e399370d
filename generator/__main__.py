"""`python -m kinetab.generator`: the same as the `kinetab` console script."""

from kinetab import main

main()
