"""Bias supply: DAC, output network, limits and the series filter resistor.

Two topologies:

* ``feedback_injection``: a regulator holds its feedback node at ``Vfb``; R1
  runs from the output to that node, R2 from it to ground, and R3 from the DAC
  to it. Summing currents at the node gives
  ``Vout = Vfb (1 + R1/R2) + (Vfb - Vdac) R1/R3``: a higher DAC code lowers
  the output (common practice for adjustable regulators).
* ``direct``: the DAC drives an amplifier, ``Vout = offset + gain Vdac``.

Both are affine in the DAC code; the DAC maps code ``n`` to ``n Vref / 2^bits``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from compensator.errors import ModelError

ROUNDING_MODES = ("nearest", "floor", "ceil")

#: Closed-loop time constant assumed for a switching bias regulator when the
#: profile gives none (common practice: such regulators settle in about 0.1 ms).
DEFAULT_REGULATOR_TIME_CONSTANT_S = 1e-4


@dataclass(frozen=True)
class Dac:
    """An ideal DAC: ``V = code Vref / 2^bits``."""

    bits: int
    reference_v: float
    reference_tolerance_pct: float = 0.05

    @property
    def full_scale_code(self) -> int:
        """Largest DAC code."""
        return (1 << self.bits) - 1

    @property
    def lsb_v(self) -> float:
        """Volts per DAC code at the DAC output."""
        return self.reference_v / (1 << self.bits)

    def voltage_v(self, dac_code):
        """DAC output voltage in volt for ``dac_code``."""
        return np.asarray(dac_code, dtype=float) * self.lsb_v


@dataclass(frozen=True)
class BiasSupply:
    """DAC plus output network plus series filter resistor.

    Attributes
    ----------
    dac : Dac
    topology : {"feedback_injection", "direct"}
    feedback_v, r1_ohm, r2_ohm, r3_ohm : float
        Feedback-injection network (volt, ohm).
    gain_v_per_v, offset_v : float
        Direct network.
    min_output_v, max_output_v : float
        What the regulator can deliver, volt.
    series_resistor_ohm : float
        Filter resistor between supply and SiPM, ohm.
    filter_capacitance_f : float
        Capacitor at the SiPM side of the resistor, farad.
    resistor_tolerance_pct : float
        Tolerance of the network resistors (or amplifier gain), percent.
    regulator_time_constant_s : float
        First-order closed-loop lag of the regulator, second.
    """

    dac: Dac
    topology: str = "feedback_injection"
    feedback_v: float = 1.25
    r1_ohm: float = 0.0
    r2_ohm: float = 1.0
    r3_ohm: float = 1.0
    gain_v_per_v: float = 1.0
    offset_v: float = 0.0
    min_output_v: float = 0.0
    max_output_v: float = 100.0
    series_resistor_ohm: float = 0.0
    filter_capacitance_f: float = 0.0
    resistor_tolerance_pct: float = 0.1
    regulator_time_constant_s: float = DEFAULT_REGULATOR_TIME_CONSTANT_S

    def __post_init__(self):
        if self.topology not in ("feedback_injection", "direct"):
            raise ModelError(f"topology must be 'feedback_injection' or 'direct', got {self.topology!r}")
        if self.volts_per_code == 0:
            raise ModelError("the supply network does not depend on the DAC code")

    @property
    def intercept_v(self) -> float:
        """Network output at DAC code 0, volt."""
        if self.topology == "direct":
            return self.offset_v
        return self.feedback_v * (1.0 + self.r1_ohm / self.r2_ohm + self.r1_ohm / self.r3_ohm)

    @property
    def volts_per_code(self) -> float:
        """Signed output change per DAC code, volt (negative for feedback injection)."""
        if self.topology == "direct":
            return self.gain_v_per_v * self.dac.lsb_v
        return -self.dac.lsb_v * self.r1_ohm / self.r3_ohm

    @property
    def lsb_v(self) -> float:
        """Output resolution, volt per DAC code (positive)."""
        return abs(self.volts_per_code)

    def network_output_v(self, dac_code):
        """Output the network asks for at ``dac_code``, before the regulator's limits, volt."""
        return self.intercept_v + self.volts_per_code * np.asarray(dac_code, dtype=float)

    def output_v(self, dac_code):
        """Regulator output at ``dac_code``, clipped to its limits, volt."""
        return np.clip(self.network_output_v(dac_code), self.min_output_v, self.max_output_v)

    def dac_code(self, output_v, rounding: str = "nearest"):
        """DAC code for a wanted output voltage.

        Parameters
        ----------
        output_v : array_like
            Wanted supply output, volt.
        rounding : {"nearest", "floor", "ceil"}
            How to round the exact (fractional) code.

        Returns
        -------
        ndarray of int64
            Codes clipped to ``[0, full_scale_code]``.
        """
        if rounding not in ROUNDING_MODES:
            raise ModelError(f"rounding must be one of {', '.join(ROUNDING_MODES)}, got {rounding!r}")
        exact = (np.asarray(output_v, dtype=float) - self.intercept_v) / self.volts_per_code
        code = {"nearest": np.rint, "floor": np.floor, "ceil": np.ceil}[rounding](exact)
        return np.clip(code, 0, self.dac.full_scale_code).astype(np.int64)

    def output_range_v(self) -> tuple[float, float]:
        """Lowest and highest output reachable over all DAC codes, volt."""
        ends = self.output_v([0, self.dac.full_scale_code])
        return float(ends.min()), float(ends.max())

    def drop_v(self, current_a):
        """Voltage lost across the series resistor at ``current_a`` (ampere), volt."""
        return np.asarray(current_a, dtype=float) * self.series_resistor_ohm


def sipm_bias_v(supply: BiasSupply, sipm, supply_v, temp_c, photon_rate_hz=0.0, tol_v=1e-9, max_iter=100):
    """Bias across the SiPM after the series-resistor drop.

    Solves ``V = Vsupply - R I(V, T)`` (see :func:`solve_operating_point_v`).

    Parameters
    ----------
    supply : BiasSupply
    sipm : compensator.physics.sipm.Sipm
    supply_v, temp_c, photon_rate_hz : array_like
        Supply output (volt), temperature (degree Celsius), photon rate (hertz).
    tol_v : float
        Convergence tolerance, volt.
    max_iter : int
        Iteration limit.

    Returns
    -------
    ndarray
        Bias at the SiPM, volt.
    """
    supply_v = np.asarray(supply_v, dtype=float)
    return solve_operating_point_v(lambda current_a: supply_v, supply_v, supply.series_resistor_ohm, sipm, temp_c,
                                   photon_rate_hz, tol_v=tol_v, max_iter=max_iter)


def solve_operating_point_v(output_v_of_current, start_v, series_resistor_ohm, sipm, temp_c, photon_rate_hz=0.0,
                            current_scale=1.0, tol_v=1e-9, max_iter=100):
    """Bias at the SiPM when the supply output may itself depend on the SiPM current.

    Solves ``V = Vout(I) - R I`` with ``I = current_scale * I_model(V, T)`` by
    fixed-point iteration from ``start_v`` (a contraction whenever
    ``R dI/dV < 1``, which holds for any sane filter). ``Vout(I)`` covers a
    firmware that corrects the drop from the current it measures.

    Parameters
    ----------
    output_v_of_current : callable
        Maps the SiPM current (ampere, array) to the supply output (volt).
    start_v : array_like
        First guess of the bias, volt.
    series_resistor_ohm : float
        Filter resistor, ohm.
    sipm : compensator.physics.sipm.Sipm
    temp_c, photon_rate_hz : array_like
        Die temperature (degree Celsius) and photon rate (hertz).
    current_scale : float or array_like
        Factor on the modelled current (to propagate a current-model error).
    tol_v : float
        Convergence tolerance, volt.
    max_iter : int
        Iteration limit.

    Returns
    -------
    ndarray
        Bias at the SiPM, volt.

    Raises
    ------
    ModelError
        No convergence within ``max_iter`` iterations.
    """
    from compensator.physics.sipm import steady_current_a

    v = np.array(start_v, dtype=float)
    for _ in range(max_iter):
        current_a = current_scale * steady_current_a(sipm, v, temp_c, photon_rate_hz)
        new = output_v_of_current(current_a) - series_resistor_ohm * current_a
        if np.all(np.abs(new - v) < tol_v):
            return new
        v = new
    raise ModelError("series-resistor operating point did not converge (R dI/dV >= 1?)")
