"""``python -m samplewright``: the window with no arguments, the command line otherwise."""

from __future__ import annotations

import sys


def main(argv=None) -> int:
    """Open the window when there are no arguments; hand any arguments to the command line."""
    argv = sys.argv[1:] if argv is None else list(argv)
    if not argv:
        from .qt.app import main as window_main

        return window_main()
    from .cli import main as cli_main

    return cli_main(argv)


if __name__ == "__main__":
    sys.exit(main())
