"""Breakdown and tempco recovered from seeded synthetic bench I-V curves, with both parts of their error."""

from __future__ import annotations

import numpy as np

from compensator.instrument.records import Characterisation

__all__ = [
    "characterise_breakdown",
]


def characterise_breakdown(sipm_profile, *, seed: int, temps_c=(-20.0, -10.0, 0.0, 10.0, 20.0, 30.0, 40.0),
                           relative_noise: float = 0.01) -> Characterisation:
    """Recover breakdown and tempco from seeded synthetic I-V curves of a sensor type.

    The profile's breakdown model is the truth; the curves carry the given
    relative noise and a Geiger-probability bend, as a bench would give.

    Parameters
    ----------
    sipm_profile : SipmProfile
        The sensor type (its breakdown model is the truth).
    seed : int
        Seed of the synthetic curves.
    temps_c : sequence of float, optional
        Temperatures of the curves, degree Celsius.
    relative_noise : float, optional
        Relative noise of the current.

    Returns
    -------
    Characterisation
    """
    from compensator.calibration.iv import find_breakdown
    from compensator.calibration.synthetic import simulate_iv
    from compensator.calibration.tempco import fit_tempco

    truth = sipm_profile.device.breakdown
    rng = np.random.default_rng(seed)
    temps_c = np.asarray(temps_c, dtype=float)
    true_v = truth.breakdown_v(temps_c)
    bias_v = np.arange(true_v.min() - 1.5, true_v.max() + 3.0, 0.01)
    current_a = simulate_iv(rng, bias_v, true_v, geiger_scale_v=0.8, relative_noise=relative_noise)
    found = find_breakdown(bias_v, current_a)
    # the method's systematic part is common to the curves: it does not average down
    fit = fit_tempco(temps_c, found.breakdown_v, found.breakdown_stat_err_v, ref_temp_c=truth.ref_temp_c,
                     common_err_v=found.breakdown_sys_err_v)
    return Characterisation(
        sipm=sipm_profile.name, curve_count=int(temps_c.size), temp_c=temps_c, breakdown_v=found.breakdown_v,
        breakdown_err_v=found.breakdown_err_v, true_breakdown_v=true_v, ref_temp_c=truth.ref_temp_c,
        breakdown_v_at_ref=fit.breakdown_v_at_ref, breakdown_err_v_at_ref=fit.breakdown_err_v,
        breakdown_stat_err_v_at_ref=float(np.sqrt(max(fit.breakdown_err_v ** 2 - fit.breakdown_sys_err_v ** 2, 0.0))),
        breakdown_sys_err_v_at_ref=fit.breakdown_sys_err_v,
        true_breakdown_v_at_ref=truth.breakdown_v_at_ref, tempco_mv_per_k=fit.tempco_mv_per_k,
        tempco_err_mv_per_k=fit.tempco_err_mv_per_k, true_tempco_mv_per_k=truth.tempco_mv_per_k, seed=seed)
