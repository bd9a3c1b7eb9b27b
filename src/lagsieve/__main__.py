"""`python -m lagsieve`: the same command line as the `lagsieve` script."""
import sys

from lagsieve.cli import main

sys.exit(main())
