"""Allow ``python -m compensator``; Ctrl-C even while the libraries load is one line and exit status 130."""

import sys

__all__: list[str] = []

try:
    from compensator.cli import main

    status = main()
except KeyboardInterrupt:
    print("compensator: interrupted", file=sys.stderr)
    status = 130
sys.exit(status)
