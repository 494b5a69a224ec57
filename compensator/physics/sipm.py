"""SiPM device model, vectorised over numpy arrays.

All functions broadcast their array arguments against each other.

Model summary (sources in brackets):

* breakdown  Vbd(T) = Vbd0 + a (T - T0) + b (T - T0)^2  (near-linear from
  -40 to +50 C; common practice)
* gain       G = C_cell (V - Vbd) / q, zero at and below breakdown; C_cell may
  carry a temperature coefficient (common practice)
* PDE        PDE(Vov) = PDE_max (1 - exp(-Vov / Vsat))  (Otte et al., NIM A 846,
  106, 2017; form quoted from memory)
* dark rate  DCR = DCR0 (Vov / Vov0)^n 2^((T - T0) / Td)  (doubling every few
  kelvin near room temperature; common practice)
* crosstalk  p = 1 - exp(-k Vov^n) with k from a reference point, so p < 1
  (grows roughly with the square of overvoltage; common practice). The mean
  number of avalanches one primary brings (itself included) follows one of
  two models, chosen per profile (``crosstalk_model``): the geometric chain,
  where each avalanche triggers at most one more with probability p, mean
  ``1/(1 - p)``; or the branching Poisson process, where each avalanche
  triggers a Poisson number of others with mean ``lambda = -ln(1 - p)`` (so
  that p is the probability of at least one), total number Borel-distributed
  with mean ``1/(1 - lambda)`` (Vinogradov, NIM A 695, 247, 2012)
* saturation N_fired = N_cells (1 - exp(-N_ph PDE / N_cells))  (Klanner, NIM A
  926, 36, 2019; pulses much shorter than the recovery time)
* current    I = q G (DCR + R_ph PDE) M, M the mean avalanches per primary of
  the crosstalk model above; afterpulsing neglected
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from compensator.constants import ELEMENTARY_CHARGE_C
from compensator.errors import ModelError

__all__ = [
    "CROSSTALK_MODELS", "EVALUATE_BLOCK", "Breakdown", "Sipm", "SipmState", "breakdown_v", "cell_capacitance_f",
    "crosstalk_branching_ratio", "crosstalk_mean_multiplier", "crosstalk_probability", "dark_rate_hz", "evaluate",
    "fired_cells", "gain", "pde", "relative_gain_change_per_k", "steady_current_a",
]

#: How prompt crosstalk multiplies a primary avalanche: ``geometric`` (chain, mean 1/(1-p)) or
#: ``branching_poisson`` (Poisson branching with lambda = -ln(1-p), mean 1/(1-lambda); Vinogradov 2012).
CROSSTALK_MODELS = ("geometric", "branching_poisson")


@dataclass(frozen=True)
class Breakdown:
    """Breakdown voltage against temperature.

    Attributes
    ----------
    breakdown_v_at_ref : float
        Breakdown voltage at ``ref_temp_c``, volt.
    ref_temp_c : float
        Reference temperature, degree Celsius.
    tempco_mv_per_k : float
        Linear temperature coefficient, millivolt per kelvin.
    curvature_mv_per_k2 : float
        Quadratic term, millivolt per kelvin squared.
    breakdown_err_v, tempco_err_mv_per_k : float
        One-sigma calibration uncertainties (volt, millivolt per kelvin).
    definition : str
        Which breakdown voltage this is: ``"gain_intercept"`` (gain against
        bias extrapolated to zero; what a gain law needs) or an I-V method
        (``"iv_inverse_log_derivative"``, ``"iv_second_derivative"``,
        ``"iv_log_derivative_peak"``).
    definition_offset_v : float or None
        The gain-intercept breakdown minus this one, volt, when known (from
        I-V curves and gain scans at the same temperature); lets a gain law
        use an I-V breakdown. ``None`` when unknown.
    definition_offset_err_v : float
        One-sigma uncertainty of ``definition_offset_v``, volt.
    """

    breakdown_v_at_ref: float
    ref_temp_c: float = 25.0
    tempco_mv_per_k: float = 0.0
    curvature_mv_per_k2: float = 0.0
    breakdown_err_v: float = 0.0
    tempco_err_mv_per_k: float = 0.0
    definition: str = "gain_intercept"
    definition_offset_v: float | None = None
    definition_offset_err_v: float = 0.0

    def breakdown_v(self, temp_c):
        """Breakdown voltage in volt at ``temp_c`` (degree Celsius, array-like)."""
        dt_k = np.asarray(temp_c, dtype=float) - self.ref_temp_c
        return self.breakdown_v_at_ref + 1e-3 * dt_k * (self.tempco_mv_per_k + self.curvature_mv_per_k2 * dt_k)

    def slope_v_per_k(self, temp_c):
        """dVbd/dT in volt per kelvin at ``temp_c``."""
        dt_k = np.asarray(temp_c, dtype=float) - self.ref_temp_c
        return 1e-3 * (self.tempco_mv_per_k + 2.0 * self.curvature_mv_per_k2 * dt_k)


@dataclass(frozen=True)
class Sipm:
    """Parameters of one SiPM type (see the module docstring for the model).

    Attributes
    ----------
    breakdown : Breakdown
    cell_capacitance_f : float
        Effective microcell capacitance at the breakdown reference temperature, farad.
    cell_count : int
    pde_max_fraction, pde_saturation_overvoltage_v : float
    dark_rate_hz, dark_ref_temp_c, dark_ref_overvoltage_v, dark_doubling_temp_k, dark_overvoltage_exponent : float
    crosstalk_probability, crosstalk_ref_overvoltage_v, crosstalk_overvoltage_exponent : float
    crosstalk_model : {"geometric", "branching_poisson"}
        How one primary multiplies through crosstalk (see the module docstring).
    max_overvoltage_v, min_overvoltage_v, max_current_a : float
    capacitance_tempco_ppm_per_k : float
    recovery_time_s : float
    """

    breakdown: Breakdown
    cell_capacitance_f: float
    cell_count: int
    pde_max_fraction: float = 0.5
    pde_saturation_overvoltage_v: float = 2.0
    dark_rate_hz: float = 0.0
    dark_ref_temp_c: float = 25.0
    dark_ref_overvoltage_v: float = 3.0
    dark_doubling_temp_k: float = 8.0
    dark_overvoltage_exponent: float = 1.0
    crosstalk_probability: float = 0.0
    crosstalk_ref_overvoltage_v: float = 3.0
    crosstalk_overvoltage_exponent: float = 2.0
    max_overvoltage_v: float = 10.0
    min_overvoltage_v: float = 0.5
    max_current_a: float = 1e-3
    capacitance_tempco_ppm_per_k: float = 0.0
    recovery_time_s: float = 50e-9
    crosstalk_model: str = "geometric"

    def __post_init__(self):
        if self.cell_capacitance_f <= 0:
            raise ModelError(f"must be positive, got {self.cell_capacitance_f!r}", key="cell_capacitance_f")
        if self.cell_count <= 0:
            raise ModelError(f"must be positive, got {self.cell_count!r}", key="cell_count")
        if not 0 <= self.crosstalk_probability < 1:
            raise ModelError(f"must be in [0, 1), got {self.crosstalk_probability!r}", key="crosstalk_probability")
        if self.crosstalk_model not in CROSSTALK_MODELS:
            raise ModelError(f"must be one of {', '.join(CROSSTALK_MODELS)}, got {self.crosstalk_model!r}",
                             key="crosstalk_model")
        if self.crosstalk_model == "branching_poisson" and self.crosstalk_probability >= 1.0 - np.exp(-1.0):
            raise ModelError(f"must be below 1 - 1/e = 0.632 for the branching Poisson model (lambda < 1), got "
                             f"{self.crosstalk_probability!r}", key="crosstalk_probability")


def breakdown_v(sipm: Sipm, temp_c):
    """Breakdown voltage.

    Parameters
    ----------
    sipm : Sipm
    temp_c : array_like
        Temperature, degree Celsius.

    Returns
    -------
    ndarray
        Breakdown voltage, volt.
    """
    return sipm.breakdown.breakdown_v(temp_c)


def cell_capacitance_f(sipm: Sipm, temp_c):
    """Microcell capacitance in farad at ``temp_c`` (degree Celsius)."""
    dt_k = np.asarray(temp_c, dtype=float) - sipm.breakdown.ref_temp_c
    return sipm.cell_capacitance_f * (1.0 + 1e-6 * sipm.capacitance_tempco_ppm_per_k * dt_k)


def gain(sipm: Sipm, bias_v, temp_c):
    """Gain (electrons per avalanche) G = C_cell (V - Vbd) / q, zero below breakdown.

    Parameters
    ----------
    sipm : Sipm
    bias_v : array_like
        Bias across the SiPM, volt.
    temp_c : array_like
        Temperature, degree Celsius.

    Returns
    -------
    ndarray
        Gain, dimensionless.
    """
    overvoltage_v = np.maximum(np.asarray(bias_v, dtype=float) - breakdown_v(sipm, temp_c), 0.0)
    return cell_capacitance_f(sipm, temp_c) * overvoltage_v / ELEMENTARY_CHARGE_C


def relative_gain_change_per_k(sipm: Sipm, overvoltage_v, temp_c=None):
    """Relative gain change per kelvin at fixed bias.

    ``(1/G) dG/dT = -(dVbd/dT) / Vov + alpha_C`` where ``alpha_C`` is the
    capacitance temperature coefficient (common practice).

    Parameters
    ----------
    sipm : Sipm
    overvoltage_v : array_like
        Overvoltage, volt (must be positive).
    temp_c : array_like, optional
        Temperature, degree Celsius (matters only with a quadratic breakdown
        term); defaults to the breakdown reference temperature.

    Returns
    -------
    ndarray
        Fractional change per kelvin (multiply by 100 for percent per kelvin).
    """
    overvoltage_v = np.asarray(overvoltage_v, dtype=float)
    if np.any(overvoltage_v <= 0):
        raise ModelError("must be positive for a relative gain change", key="overvoltage_v")
    temp_c = sipm.breakdown.ref_temp_c if temp_c is None else temp_c
    return -sipm.breakdown.slope_v_per_k(temp_c) / overvoltage_v + 1e-6 * sipm.capacitance_tempco_ppm_per_k


def pde(sipm: Sipm, overvoltage_v):
    """Photon detection efficiency (fraction) at ``overvoltage_v`` (volt); zero below breakdown."""
    ov = np.maximum(np.asarray(overvoltage_v, dtype=float), 0.0)
    return sipm.pde_max_fraction * -np.expm1(-ov / sipm.pde_saturation_overvoltage_v)


def dark_rate_hz(sipm: Sipm, temp_c, overvoltage_v):
    """Dark count rate of the device in hertz; zero below breakdown.

    Parameters
    ----------
    sipm : Sipm
    temp_c : array_like
        Temperature, degree Celsius.
    overvoltage_v : array_like
        Overvoltage, volt.
    """
    ov = np.maximum(np.asarray(overvoltage_v, dtype=float), 0.0)
    dt_k = np.asarray(temp_c, dtype=float) - sipm.dark_ref_temp_c
    return (sipm.dark_rate_hz * (ov / sipm.dark_ref_overvoltage_v) ** sipm.dark_overvoltage_exponent
            * np.exp2(dt_k / sipm.dark_doubling_temp_k))


def crosstalk_probability(sipm: Sipm, overvoltage_v):
    """Prompt crosstalk probability (fraction, below 1) at ``overvoltage_v`` (volt)."""
    ov = np.maximum(np.asarray(overvoltage_v, dtype=float), 0.0)
    p_ref = sipm.crosstalk_probability
    if p_ref == 0.0:
        return np.zeros_like(ov)
    k = -np.log1p(-p_ref) / sipm.crosstalk_ref_overvoltage_v ** sipm.crosstalk_overvoltage_exponent
    return -np.expm1(-k * ov ** sipm.crosstalk_overvoltage_exponent)


def crosstalk_branching_ratio(probability):
    """Poisson branching ratio ``lambda = -ln(1 - p)`` of a crosstalk probability ``p``.

    ``p`` is the probability that an avalanche triggers at least one other;
    for a Poisson number of triggered avalanches with mean lambda,
    ``p = 1 - exp(-lambda)`` (Vinogradov, NIM A 695, 247, 2012).

    Parameters
    ----------
    probability : array_like
        Crosstalk probability, fraction in [0, 1).

    Returns
    -------
    ndarray
        Branching ratio lambda, dimensionless.
    """
    return -np.log1p(-np.asarray(probability, dtype=float))


def crosstalk_mean_multiplier(sipm: Sipm, overvoltage_v):
    """Mean number of avalanches one primary brings through prompt crosstalk, itself included.

    ``1/(1 - p)`` for the geometric chain; ``1/(1 - lambda)``, ``lambda =
    -ln(1 - p)``, the mean of the Borel distribution, for the branching
    Poisson process (Vinogradov, NIM A 695, 247, 2012); ``p`` is
    :func:`crosstalk_probability` at ``overvoltage_v``. The branching model
    diverges as lambda approaches 1 (p approaches 1 - 1/e).

    Parameters
    ----------
    sipm : Sipm
    overvoltage_v : array_like
        Overvoltage, volt.

    Returns
    -------
    ndarray
        Mean avalanches per primary, at least 1 (``inf`` where lambda >= 1).
    """
    p = crosstalk_probability(sipm, overvoltage_v)
    if sipm.crosstalk_model == "branching_poisson":
        with np.errstate(divide="ignore"):
            excess = 1.0 - crosstalk_branching_ratio(p)
            return np.where(excess > 0, 1.0 / np.where(excess > 0, excess, 1.0), np.inf)
    return 1.0 / (1.0 - p)


def fired_cells(cell_count, photon_count, pde_fraction):
    """Mean number of fired microcells for a short light pulse.

    ``N_fired = N_cells (1 - exp(-N_ph PDE / N_cells))`` (Klanner, NIM A 926,
    36, 2019), valid for pulses much shorter than the recovery time.

    Parameters
    ----------
    cell_count : array_like
        Number of microcells.
    photon_count : array_like
        Photons reaching the sensor in the pulse.
    pde_fraction : array_like
        Photon detection efficiency, fraction.
    """
    n = np.asarray(cell_count, dtype=float)
    return n * -np.expm1(-np.asarray(photon_count, dtype=float) * np.asarray(pde_fraction, dtype=float) / n)


def steady_current_a(sipm: Sipm, bias_v, temp_c, photon_rate_hz=0.0):
    """Steady current drawn by the SiPM in ampere.

    ``I = q G (DCR + R_ph PDE) M``: each primary avalanche (dark or photon)
    brings on average ``M`` avalanches through crosstalk
    (:func:`crosstalk_mean_multiplier`). Afterpulsing is neglected.

    Parameters
    ----------
    sipm : Sipm
    bias_v : array_like
        Bias across the SiPM, volt.
    temp_c : array_like
        Temperature, degree Celsius.
    photon_rate_hz : array_like
        Rate of photons reaching the sensor, hertz.
    """
    ov = np.asarray(bias_v, dtype=float) - breakdown_v(sipm, temp_c)
    primaries_hz = dark_rate_hz(sipm, temp_c, ov) + np.asarray(photon_rate_hz, dtype=float) * pde(sipm, ov)
    return ELEMENTARY_CHARGE_C * gain(sipm, bias_v, temp_c) * primaries_hz * crosstalk_mean_multiplier(sipm, ov)


@dataclass(frozen=True)
class SipmState:
    """The model evaluated at a set of operating points (arrays broadcast together).

    Attributes
    ----------
    temp_c, bias_v, breakdown_v, overvoltage_v : ndarray
        Degree Celsius and volt.
    gain : ndarray
        Electrons per avalanche.
    pde_fraction, crosstalk_probability : ndarray
        Fractions.
    dark_rate_hz : ndarray
        Hertz.
    current_a : ndarray
        Steady dark current, ampere.
    gain_change_pct_per_k : ndarray
        Relative gain change at fixed bias, percent per kelvin (NaN below breakdown).
    """

    temp_c: np.ndarray
    bias_v: np.ndarray
    breakdown_v: np.ndarray
    overvoltage_v: np.ndarray
    gain: np.ndarray
    pde_fraction: np.ndarray
    dark_rate_hz: np.ndarray
    crosstalk_probability: np.ndarray
    current_a: np.ndarray
    gain_change_pct_per_k: np.ndarray


def _power(x, exponent):
    """``x ** exponent`` with the common integer exponents done by multiplication."""
    if exponent == 1.0:
        return x
    if exponent == 2.0:
        return x * x
    if exponent == 0.0:
        return np.ones_like(x)
    return x ** exponent


def _evaluate_block(sipm: Sipm, temp_c, bias_v, photon_rate_hz):
    """The whole model on equally shaped 1-d blocks, each quantity computed once."""
    bd = sipm.breakdown
    dt_k = temp_c - bd.ref_temp_c
    slope_v_per_k = 1e-3 * (bd.tempco_mv_per_k + 2.0 * bd.curvature_mv_per_k2 * dt_k) if bd.curvature_mv_per_k2 \
        else np.full_like(dt_k, 1e-3 * bd.tempco_mv_per_k)
    vbd = bd.breakdown_v_at_ref + 1e-3 * dt_k * (bd.tempco_mv_per_k + bd.curvature_mv_per_k2 * dt_k)
    ov = bias_v - vbd
    ov_pos = np.maximum(ov, 0.0)
    per_volt = sipm.cell_capacitance_f / ELEMENTARY_CHARGE_C
    if sipm.capacitance_tempco_ppm_per_k:
        g = ov_pos * (per_volt * (1.0 + 1e-6 * sipm.capacitance_tempco_ppm_per_k * dt_k))
    else:
        g = ov_pos * per_volt
    pde_fraction = np.expm1(ov_pos * (-1.0 / sipm.pde_saturation_overvoltage_v))
    pde_fraction *= -sipm.pde_max_fraction
    dcr = _power(ov_pos * (1.0 / sipm.dark_ref_overvoltage_v), sipm.dark_overvoltage_exponent)
    dcr = dcr * np.exp2((temp_c - sipm.dark_ref_temp_c) * (1.0 / sipm.dark_doubling_temp_k))
    dcr *= sipm.dark_rate_hz
    if sipm.crosstalk_probability:
        k = -np.log1p(-sipm.crosstalk_probability) / sipm.crosstalk_ref_overvoltage_v ** sipm.crosstalk_overvoltage_exponent
        xt = np.expm1(_power(ov_pos, sipm.crosstalk_overvoltage_exponent) * -k)
        xt *= -1.0
    else:
        xt = np.zeros_like(ov_pos)
    primaries_hz = dcr + photon_rate_hz * pde_fraction if np.any(photon_rate_hz) else dcr
    current = g * primaries_hz
    current *= ELEMENTARY_CHARGE_C
    if sipm.crosstalk_model == "branching_poisson":
        current /= 1.0 + np.log1p(-xt)  # 1 - lambda
    else:
        current /= 1.0 - xt
    with np.errstate(divide="ignore", invalid="ignore"):
        change = slope_v_per_k / ov
        change *= -100.0
        if sipm.capacitance_tempco_ppm_per_k:
            change += 1e-4 * sipm.capacitance_tempco_ppm_per_k
    change[ov <= 0] = np.nan
    return vbd, ov, g, pde_fraction, dcr, xt, current, change


#: Points per block in :func:`evaluate`: small enough that temporaries stay in cache.
EVALUATE_BLOCK = 1 << 14


def evaluate(sipm: Sipm, temp_c, bias_v=None, overvoltage_v=None, photon_rate_hz=0.0) -> SipmState:
    """Evaluate the whole model at fixed bias or at fixed overvoltage.

    Each quantity is computed once per point, block by block so that the
    temporaries stay in cache; the result equals the individual functions of
    this module.

    Parameters
    ----------
    sipm : Sipm
    temp_c : array_like
        Temperatures, degree Celsius.
    bias_v : array_like, optional
        Bias across the SiPM, volt. Give exactly one of ``bias_v`` and ``overvoltage_v``.
    overvoltage_v : array_like, optional
        Overvoltage, volt; the bias then follows the breakdown.
    photon_rate_hz : array_like
        Photon rate for the current, hertz.

    Returns
    -------
    SipmState
    """
    if (bias_v is None) == (overvoltage_v is None):
        raise ModelError("give exactly one of bias_v and overvoltage_v", key="bias_v")
    temp_c = np.asarray(temp_c, dtype=float)
    if bias_v is None:
        bias = breakdown_v(sipm, temp_c) + np.asarray(overvoltage_v, dtype=float)
    else:
        bias = np.asarray(bias_v, dtype=float)
    shape = np.broadcast_shapes(temp_c.shape, bias.shape, np.shape(photon_rate_hz))
    t = np.broadcast_to(temp_c, shape).ravel()
    v = np.broadcast_to(bias, shape).ravel()
    rate = np.broadcast_to(np.asarray(photon_rate_hz, dtype=float), shape).ravel()
    outputs = [np.empty(t.size) for _ in range(8)]
    for start in range(0, t.size, EVALUATE_BLOCK):
        block = slice(start, start + EVALUATE_BLOCK)
        for out, value in zip(outputs, _evaluate_block(sipm, t[block], v[block], rate[block])):
            out[block] = value
    vbd, ov, g, pde_fraction, dcr, xt, current, change = (o.reshape(shape) for o in outputs)
    return SipmState(
        temp_c=t.reshape(shape), bias_v=v.reshape(shape), breakdown_v=vbd, overvoltage_v=ov, gain=g,
        pde_fraction=pde_fraction, dark_rate_hz=dcr, crosstalk_probability=xt, current_a=current,
        gain_change_pct_per_k=change,
    )
