"""Counting distributions of prompt optical crosstalk (Vinogradov, NIM A 695, 247, 2012).

A primary avalanche triggers a Poisson number of secondaries with mean
``lambda`` (the branching ratio), each of which may trigger more: the total
number of cells fired by one primary follows the Borel distribution, and a
Poisson number of primaries (mean ``mu``) gives the generalised Poisson
distribution. The probability that an avalanche triggers at least one
neighbour is ``p = 1 - exp(-lambda)`` (the ``crosstalk.probability`` of a
SiPM profile); :func:`~compensator.physics.sipm.crosstalk_branching_ratio`
gives ``lambda`` from ``p`` and :func:`crosstalk_probability_from_branching_ratio`
the reverse.
"""

from __future__ import annotations

import numpy as np
from scipy import special

from compensator.errors import ModelError
from compensator.physics.sipm import crosstalk_branching_ratio

__all__ = ["borel_pmf", "crosstalk_branching_ratio", "crosstalk_probability_from_branching_ratio", "generalized_poisson_pmf"]

def _check_counts_and_branching(name, k, lam):
    """k as non-negative whole floats and lam in [0, 1), or a ModelError."""
    kf = np.asarray(k).astype(float)
    lam = np.asarray(lam, dtype=float)
    if not np.all(np.isfinite(kf)) or np.any(kf < 0) or np.any(kf != np.round(kf)):
        raise ModelError(f"{name}: k must be non-negative integers")
    if not np.all(np.isfinite(lam)) or np.any(lam < 0) or np.any(lam >= 1):
        raise ModelError(f"{name}: lam must lie in [0, 1)")
    return kf, lam


def generalized_poisson_pmf(k, mu, lam) -> np.ndarray:
    """Generalised Poisson probabilities for prompt optical crosstalk.

    ``P(k) = mu (mu + k lam)**(k-1) exp(-mu - k lam) / k!`` (Vinogradov, NIM A
    695, 247, 2012): the number of fired cells when a Poisson number of primary
    photoelectrons (mean ``mu``) each start a branching Poisson chain with mean
    ``lam`` secondaries per avalanche.

    Parameters
    ----------
    k : array_like of int
        Numbers of fired cells, >= 0.
    mu : array_like
        Mean number of primary photoelectrons, >= 0.
    lam : array_like
        Crosstalk branching ratio, 0 <= lam < 1.

    Returns
    -------
    numpy.ndarray
        Probabilities, broadcast over ``k``, ``mu`` and ``lam``.

    Raises
    ------
    ModelError
        For negative or non-integer ``k``, negative ``mu`` or ``lam`` outside
        [0, 1).
    """
    kf, lam = _check_counts_and_branching("generalized_poisson_pmf", k, lam)
    mu = np.asarray(mu, dtype=float)
    if not np.all(np.isfinite(mu)) or np.any(mu < 0):
        raise ModelError("generalized_poisson_pmf: mu must be finite and >= 0")
    kf, mu, lam = np.broadcast_arrays(kf, mu, lam)
    out = np.zeros(kf.shape)
    pos = mu > 0
    with np.errstate(divide="ignore", invalid="ignore"):
        logp = (
            np.log(np.where(pos, mu, 1.0))
            + special.xlogy(kf - 1.0, np.where(pos, mu + kf * lam, 1.0))
            - mu - kf * lam - special.gammaln(kf + 1.0)
        )
    out[pos] = np.exp(logp[pos])
    out[~pos & (kf == 0)] = 1.0
    return out


def borel_pmf(k, lam) -> np.ndarray:
    """Borel probabilities: cells fired by one primary avalanche with crosstalk.

    ``P(k) = exp(-lam k) (lam k)**(k-1) / k!`` for ``k >= 1``: the total size
    of a branching Poisson chain started by a single avalanche, each avalanche
    triggering on average ``lam`` more. It is the ``mu -> 0`` limit of the
    generalised Poisson distribution (Vinogradov, NIM A 695, 247, 2012) given
    that at least one cell fired, and describes self-triggered dark-count
    spectra (no pedestal). Mean ``1/(1 - lam)``, variance ``lam/(1 - lam)**3``.

    Parameters
    ----------
    k : array_like of int
        Numbers of fired cells, >= 1 (``P(0) = 0``; 0 is accepted).
    lam : array_like
        Crosstalk branching ratio, 0 <= lam < 1.

    Returns
    -------
    numpy.ndarray
        Probabilities, broadcast over ``k`` and ``lam``.

    Raises
    ------
    ModelError
        For negative or non-integer ``k`` or ``lam`` outside [0, 1).
    """
    kf, lam = np.broadcast_arrays(*_check_counts_and_branching("borel_pmf", k, lam))
    with np.errstate(divide="ignore", invalid="ignore"):
        logp = -lam * kf + special.xlogy(kf - 1.0, lam * kf) - special.gammaln(kf + 1.0)
    out = np.where(kf >= 1, np.exp(logp), 0.0)
    return np.where((kf == 1) & (lam == 0), 1.0, out)


def crosstalk_probability_from_branching_ratio(branching_ratio, branching_ratio_err=0.0):
    """Probability of at least one crosstalk avalanche, ``p = 1 - exp(-lambda)``, and its error.

    Parameters
    ----------
    branching_ratio : array_like
        Poisson branching ratio ``lambda`` (mean secondaries per avalanche), 0 <= lambda < 1.
    branching_ratio_err : array_like
        One-sigma error of ``lambda`` (propagated to first order: ``exp(-lambda) err``).

    Returns
    -------
    probability, probability_err : ndarray
        ``p`` (a fraction, 0 to 1) and its one-sigma error.

    Raises
    ------
    ModelError
        ``lambda`` outside [0, 1) or not finite, or a negative error.
    """
    lam = np.asarray(branching_ratio, dtype=float)
    err = np.asarray(branching_ratio_err, dtype=float)
    if not np.all(np.isfinite(lam)) or np.any(lam < 0) or np.any(lam >= 1):
        raise ModelError("branching_ratio must lie in [0, 1)", key="branching_ratio")
    if not np.all(np.isfinite(err)) or np.any(err < 0):
        raise ModelError("branching_ratio_err must be finite and non-negative", key="branching_ratio_err")
    return -np.expm1(-lam), np.exp(-lam) * err

