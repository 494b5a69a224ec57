"""The response of a scintillation counter: SiPM gain x PDE x crosstalk x the crystal's light yield.

A spectrometer needs its peak position constant, not only the gain. The
charge of a peak is proportional to

``R(Vov, T) = G(Vov, T) PDE(Vov) M(Vov) Y(T)``

with ``G = C(T) Vov / q`` the gain, ``PDE`` the photon detection efficiency,
``M`` the mean avalanches per primary through prompt crosstalk
(:func:`compensator.physics.sipm.crosstalk_mean_multiplier`) and ``Y`` the
scintillator's relative light yield,
``Y(T) = 1 + a (T - T0) + b (T - T0)^2`` (a in percent per kelvin, b in
percent per kelvin squared; tenths of a percent per kelvin for common
crystals, common practice). Saturation and afterpulsing are left out: both
depend on the light level, not only on temperature.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from compensator.errors import ModelError
from compensator.physics.sipm import Sipm, cell_capacitance_f, crosstalk_mean_multiplier, pde

__all__ = ["Scintillator", "relative_light_yield", "response_per_photon", "overvoltage_for_response"]


@dataclass(frozen=True, kw_only=True)
class Scintillator:
    """Light yield of a scintillator against temperature.

    Attributes
    ----------
    ref_temp_c : float
        Temperature where the relative light yield is 1, degree Celsius.
    light_yield_tempco_pct_per_k : float
        Linear coefficient a, percent per kelvin (negative for most crystals).
    light_yield_curvature_pct_per_k2 : float
        Quadratic coefficient b, percent per kelvin squared.
    light_yield_tempco_err_pct_per_k : float
        One-sigma uncertainty of a, percent per kelvin.
    """

    ref_temp_c: float = 25.0
    light_yield_tempco_pct_per_k: float = 0.0
    light_yield_curvature_pct_per_k2: float = 0.0
    light_yield_tempco_err_pct_per_k: float = 0.0

    def __post_init__(self):
        for name in ("ref_temp_c", "light_yield_tempco_pct_per_k", "light_yield_curvature_pct_per_k2",
                     "light_yield_tempco_err_pct_per_k"):
            if not np.isfinite(getattr(self, name)):
                raise ModelError(f"must be finite, got {getattr(self, name)!r}", key=name)
        if self.light_yield_tempco_err_pct_per_k < 0:
            raise ModelError("must be non-negative", key="light_yield_tempco_err_pct_per_k")


def relative_light_yield(scintillator: Scintillator, temp_c, tempco_error_pct_per_k=0.0):
    """Light yield relative to the reference temperature, ``1 + a dT + b dT^2``.

    Parameters
    ----------
    scintillator : Scintillator
    temp_c : array_like
        Crystal temperature, degree Celsius.
    tempco_error_pct_per_k : array_like
        Error added to the linear coefficient, percent per kelvin.

    Returns
    -------
    ndarray
        Relative light yield, dimensionless.

    Raises
    ------
    ModelError
        Where the polynomial gives no light (the coefficients are far outside their range).
    """
    dt_k = np.asarray(temp_c, dtype=float) - scintillator.ref_temp_c
    a = scintillator.light_yield_tempco_pct_per_k + np.asarray(tempco_error_pct_per_k, dtype=float)
    y = 1.0 + 1e-2 * dt_k * (a + scintillator.light_yield_curvature_pct_per_k2 * dt_k)
    if np.any(y <= 0):
        raise ModelError("the light yield falls to zero inside the temperature range",
                         key="light_yield_tempco_pct_per_k")
    return y


def response_per_photon(sipm: Sipm, scintillator: Scintillator, overvoltage_v, temp_c, tempco_error_pct_per_k=0.0):
    """Mean charge per scintillation photon, in electrons: ``C(T) Vov / q * PDE * M * Y(T)``.

    Parameters
    ----------
    sipm : Sipm
    scintillator : Scintillator
    overvoltage_v : array_like
        Overvoltage, volt (zero response at and below zero).
    temp_c : array_like
        Temperature of the SiPM and the crystal, degree Celsius.
    tempco_error_pct_per_k : array_like
        Error added to the light-yield coefficient, percent per kelvin.

    Returns
    -------
    ndarray
        Electrons per photon reaching the crystal's light output, relative light yield included.
    """
    from compensator.constants import ELEMENTARY_CHARGE_C

    ov = np.maximum(np.asarray(overvoltage_v, dtype=float), 0.0)
    g = cell_capacitance_f(sipm, temp_c) * ov / ELEMENTARY_CHARGE_C
    return (g * pde(sipm, ov) * crosstalk_mean_multiplier(sipm, ov)
            * relative_light_yield(scintillator, temp_c, tempco_error_pct_per_k))


def overvoltage_for_response(sipm: Sipm, scintillator: Scintillator, target, temp_c, *, max_overvoltage_v,
                             tol_v=1e-9):
    """Overvoltage at which :func:`response_per_photon` equals ``target`` (bisection, vectorised).

    The response rises monotonically with overvoltage (gain, PDE and
    crosstalk all rise), so the root is unique. Where even
    ``max_overvoltage_v`` falls short, that value is returned (the law's
    limits then report the clamp).

    Parameters
    ----------
    sipm : Sipm
    scintillator : Scintillator
    target : array_like
        Response to hold, electrons per photon.
    temp_c : array_like
        Temperature, degree Celsius.
    max_overvoltage_v : float
        Upper end of the search, volt.
    tol_v : float
        Width of the final bracket, volt.

    Returns
    -------
    ndarray
        Overvoltage, volt.
    """
    t = np.asarray(temp_c, dtype=float)
    target = np.broadcast_to(np.asarray(target, dtype=float), t.shape)
    lo = np.zeros(t.shape)
    hi = np.full(t.shape, float(max_overvoltage_v))
    steps = int(np.ceil(np.log2(max(max_overvoltage_v, tol_v) / tol_v))) + 1
    for _ in range(steps):
        mid = 0.5 * (lo + hi)
        low = response_per_photon(sipm, scintillator, mid, t) < target
        lo = np.where(low, mid, lo)
        hi = np.where(low, hi, mid)
    return 0.5 * (lo + hi)
