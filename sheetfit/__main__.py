"""`python -m sheetfit`: the same command line as the `sheetfit` script."""

from .cli import main

if __name__ == "__main__":
    main()
