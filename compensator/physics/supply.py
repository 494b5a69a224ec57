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

__all__ = [
    "DEFAULT_REGULATOR_TIME_CONSTANT_S", "ROUNDING_MODES", "BiasSupply", "Dac", "network_output_v", "sipm_bias_v",
    "solve_operating_point_v",
]

ROUNDING_MODES = ("nearest", "floor", "ceil")

#: Closed-loop time constant assumed for a switching bias regulator when the
#: profile gives none (common practice: such regulators settle in about 0.1 ms).
DEFAULT_REGULATOR_TIME_CONSTANT_S = 1e-4


@dataclass(frozen=True)
class Dac:
    """A DAC: ideally ``V = code Vref / 2^bits``.

    Attributes
    ----------
    bits : int
    reference_v : float
        Full-scale reference, volt.
    reference_tolerance_pct : float
        Reference tolerance, percent.
    reference_tempco_ppm_per_k : float
        Reference drift bound, ppm per kelvin of board temperature.
    offset_lsb, gain_error_pct, inl_lsb : float
        Offset (LSB), gain error (percent) and integral non-linearity (LSB)
        bounds, either sign.
    """

    bits: int
    reference_v: float
    reference_tolerance_pct: float = 0.05
    reference_tempco_ppm_per_k: float = 0.0
    offset_lsb: float = 0.0
    gain_error_pct: float = 0.0
    inl_lsb: float = 0.0

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
    resistor_tempco_ppm_per_k : float
        Temperature coefficient bound of each network resistor, ppm per kelvin.
    resistor_tracking_ppm_per_k : float or None
        Bound of the difference between two network resistors' coefficients
        (a matched network tracks to a few ppm per kelvin); ``None`` for
        independent parts (twice the coefficient).
    feedback_tolerance_pct, feedback_tempco_ppm_per_k : float
        Tolerance (percent) and drift (ppm per kelvin) of the regulator's
        feedback reference ``feedback_v`` (feedback injection only).
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
    resistor_tempco_ppm_per_k: float = 0.0
    resistor_tracking_ppm_per_k: float | None = None
    feedback_tolerance_pct: float = 0.0
    feedback_tempco_ppm_per_k: float = 0.0

    def __post_init__(self):
        if self.topology not in ("feedback_injection", "direct"):
            raise ModelError(f"must be 'feedback_injection' or 'direct', got {self.topology!r}", key="topology")
        if self.volts_per_code == 0:
            raise ModelError("the supply network does not depend on the DAC code", key="topology")

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
            raise ModelError(f"must be one of {', '.join(ROUNDING_MODES)}, got {rounding!r}", key="rounding")
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

    @property
    def resistor_drift_ppm_per_k(self) -> float:
        """Drift bound of each resistor's share in the network's ratios, ppm per kelvin.

        The network's output depends on resistor ratios only, so a drift
        common to all resistors cancels; what is left is each resistor's
        departure from the others: the tempco itself for independent parts,
        half the tracking for a matched network (so that two resistors differ
        by at most the tracking).
        """
        if self.resistor_tracking_ppm_per_k is None:
            return self.resistor_tempco_ppm_per_k
        return min(self.resistor_tempco_ppm_per_k, 0.5 * self.resistor_tracking_ppm_per_k)


def network_output_v(supply: BiasSupply, dac_code, *, dac_error=0.0, dac_offset_lsb=0.0, resistor_errors=(0.0, 0.0, 0.0),
                     feedback_error=0.0, clip=True):
    """Supply output at ``dac_code`` with relative errors of its parts (arrays broadcast).

    Parameters
    ----------
    supply : BiasSupply
    dac_code : array_like
        DAC code (may be fractional).
    dac_error : array_like
        Relative error of the DAC's volts per code (reference, gain error and their drifts), fraction.
    dac_offset_lsb : array_like
        DAC offset, in DAC codes.
    resistor_errors : tuple of array_like
        Relative errors of R1, R2, R3 (feedback injection) or of the amplifier gain (first entry; direct).
    feedback_error : array_like
        Relative error of the regulator's feedback reference (feedback injection only).
    clip : bool
        Clip to the regulator's output range.

    Returns
    -------
    ndarray
        Supply output, volt.
    """
    v_dac = (np.asarray(dac_code, dtype=float) + dac_offset_lsb) * supply.dac.lsb_v * (1.0 + np.asarray(dac_error))
    e1, e2, e3 = resistor_errors
    if supply.topology == "feedback_injection":
        r1 = supply.r1_ohm * (1.0 + e1)
        r2 = supply.r2_ohm * (1.0 + e2)
        r3 = supply.r3_ohm * (1.0 + e3)
        v_fb = supply.feedback_v * (1.0 + np.asarray(feedback_error))
        out = v_fb * (1.0 + r1 / r2 + r1 / r3) - v_dac * r1 / r3
    else:
        out = supply.offset_v + supply.gain_v_per_v * (1.0 + e1) * v_dac
    return np.clip(out, supply.min_output_v, supply.max_output_v) if clip else out


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
    raise ModelError("series-resistor operating point did not converge (R dI/dV >= 1?)", key="series_resistor_ohm")
