"""Allow ``python -m compensator`` (the same as the ``compensator`` program, :func:`compensator.cli.run`)."""

import sys

__all__: list[str] = []

try:
    from compensator.cli import run
except KeyboardInterrupt:  # in the few milliseconds before run() takes charge of Ctrl-C
    print("compensator: interrupted", file=sys.stderr)
    sys.exit(130)
run()
