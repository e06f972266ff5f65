"""`python -m biastree` runs the command line."""

import sys

try:  # Ctrl-C while the command line loads: one line, not a traceback
    from biastree.cli import main
except KeyboardInterrupt:
    sys.stderr.write("error: interrupted\n")
    sys.exit(130)

if __name__ == "__main__":
    main()
