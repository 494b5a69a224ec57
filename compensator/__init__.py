"""compensator: hold a SiPM's gain constant over temperature.

Characterise the sensor, choose a compensation law and know the gain error it
leaves, put it on a microcontroller as integer tables and fixed-point PID code,
and verify the loops offline.
"""

__version__ = "0.1.0"

from compensator.errors import (  # noqa: E402
    CompensatorError,
    InputError,
    ModelError,
    ProfileError,
)

__all__ = ["__version__", "CompensatorError", "InputError", "ModelError", "ProfileError"]
