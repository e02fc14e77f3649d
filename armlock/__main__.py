"""`python -m armlock` runs the CLI."""

from .cli import main

main()
