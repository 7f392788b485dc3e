"""The bundle's entry point: the window with no arguments, the command line otherwise."""

import multiprocessing
import sys

from samplewright.__main__ import main

if __name__ == "__main__":
    multiprocessing.freeze_support()
    sys.exit(main())
