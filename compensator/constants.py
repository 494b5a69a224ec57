"""Physical constants (CODATA 2018 exact SI values)."""

__all__ = ["ELEMENTARY_CHARGE_C", "ZERO_C_IN_K"]

#: Elementary charge in coulomb (exact since the 2019 SI redefinition).
ELEMENTARY_CHARGE_C = 1.602176634e-19

#: Offset between the Celsius and kelvin scales.
ZERO_C_IN_K = 273.15
