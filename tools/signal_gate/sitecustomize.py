"""Hold a ``compensator`` process at a chosen moment until a signal arrives (for interrupt tests and the sweep).

Put this folder first on ``PYTHONPATH`` and name the moment in ``COMPENSATOR_GATE``:

- ``import:NAME`` -- when the module NAME is first imported (``import:numpy`` is while the libraries load,
  before any command starts; ``import:compensator.instrument`` is inside ``demo``'s run);
- ``fsync:N`` -- at the N-th ``os.fsync``, i.e. half-way through writing a set of files.

The process writes ``gate: waiting at ...`` on stderr and then waits (in short sleeps, so that Python runs its
signal handlers) until a signal handler ends the wait by raising or by ending the process. The sender waits for
that line instead of sleeping a fixed time. Without ``COMPENSATOR_GATE`` nothing changes.
"""

import os
import sys
import time

_GATE = os.environ.get("COMPENSATOR_GATE", "")


def _wait(where: str) -> None:
    sys.stderr.write(f"gate: waiting at {where}\n")
    sys.stderr.flush()
    while True:
        time.sleep(0.005)


if _GATE.startswith("import:"):
    _MODULE = _GATE.partition(":")[2]

    class _ImportGate:
        def find_spec(self, name, path=None, target=None):
            if name == _MODULE:
                sys.meta_path.remove(self)
                _wait(f"import {name}")
            return None

    sys.meta_path.insert(0, _ImportGate())
elif _GATE.startswith("fsync:"):
    _AT = int(_GATE.partition(":")[2])
    _real_fsync = os.fsync
    _calls = [0]

    def _fsync(fd):
        _real_fsync(fd)
        _calls[0] += 1
        if _calls[0] == _AT:
            _wait(f"fsync {_AT}")

    os.fsync = _fsync
