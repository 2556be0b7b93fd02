"""`python -m planner` is the same as `kplan`."""

from .cli import main

main()
