"""`python -m biastree` runs the command line."""

from biastree.cli import main

if __name__ == "__main__":
    main()
