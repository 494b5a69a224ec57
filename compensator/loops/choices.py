"""The tuning methods and defaults by name, without importing the numerical stack (for fast command-line start)."""

__all__ = ["METHODS", "DEFAULT_MS"]

#: Tuning methods: published rules on a low-order model, the ultimate-cycle rule, and the robust optimiser.
METHODS = ("simc", "amigo", "imc", "zn", "zn-cycle", "robust")
#: Default bound on the maximum sensitivity (common practice: 1.4 robust, 2.0 aggressive).
DEFAULT_MS = 1.4
