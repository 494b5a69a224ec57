"""The offset between two breakdown definitions measured on the same device at the same temperatures.

The I-V turn-on voltage and the gain-zero voltage (the intercept of gain
against bias) are different quantities: published comparisons find them tens
to hundreds of millivolts apart, the I-V one above (Chmill et al., NIM A 845,
56, 2017). A compensation law needs the gain-intercept breakdown. When both
are measured at the same temperatures, their difference is measured too, and
a temperature coefficient fitted on many I-V curves can be moved onto the
gain-intercept definition by it (:func:`~compensator.calibration.tempco.fit_tempco`
with ``offset_v``).

The offset is the weighted mean of the differences at matched temperatures
(weights from the errors of both breakdowns); its one-sigma error is the
weighted-mean error, scaled by sqrt(chi2/ndf) when the differences scatter
more than their errors say (common practice). A scatter that is improbable
(p < 0.001, ``scipy.stats.chi2``) also becomes a finding: the offset may
depend on temperature, and one number does not describe it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from compensator.errors import ModelError
from compensator.findings import Finding, Severity

__all__ = ["MATCH_TOLERANCE_K", "DefinitionOffset", "definition_offset"]

#: Breakdowns measured within this many kelvin of each other count as the same temperature.
MATCH_TOLERANCE_K = 0.5


@dataclass(frozen=True, kw_only=True)
class DefinitionOffset:
    """The breakdown of one definition minus that of another, on the same device.

    Attributes
    ----------
    offset_v, offset_err_v : float
        ``to`` minus ``from`` breakdown and its one-sigma error, volt.
    from_definition, to_definition : str or None
        The definitions (None where the data do not say).
    matched_points : int
        Temperatures measured with both definitions.
    chi2 : float
        Chi-square of the differences about their weighted mean.
    ndf : int
        ``matched_points - 1``.
    chi2_p_value : float
        ``scipy.stats.chi2.sf(chi2, ndf)`` (NaN with one point).
    findings : tuple of Finding
        An improbable scatter (the offset may depend on temperature).
    """

    offset_v: float
    offset_err_v: float
    from_definition: str | None
    to_definition: str | None
    matched_points: int
    chi2: float
    ndf: int
    chi2_p_value: float
    findings: tuple = ()


def definition_offset(temp_c, breakdown_v, breakdown_err_v, to_temp_c, to_breakdown_v, to_breakdown_err_v, *,
                      from_definition=None, to_definition=None, tolerance_k=MATCH_TOLERANCE_K) -> DefinitionOffset:
    """Offset of the ``to`` breakdowns from the ``from`` breakdowns at matched temperatures.

    Parameters
    ----------
    temp_c, breakdown_v, breakdown_err_v : array_like
        The ``from`` breakdowns (e.g. I-V): degree Celsius, volt, one-sigma volt.
    to_temp_c, to_breakdown_v, to_breakdown_err_v : array_like
        The ``to`` breakdowns (e.g. gain intercepts): degree Celsius, volt, one-sigma volt.
    from_definition, to_definition : str, optional
        Their definitions, carried into the result.
    tolerance_k : float
        Two temperatures within this many kelvin are matched (each ``to`` point
        takes the nearest ``from`` point).

    Returns
    -------
    DefinitionOffset

    Raises
    ------
    ModelError
        The two sets are of the same definition, no temperature is matched, or
        an error is not positive.
    """
    if from_definition is not None and from_definition == to_definition:
        raise ModelError(f"both breakdown sets are of the definition {from_definition}: no offset to measure",
                         key="definition")
    t_a, v_a, e_a = (np.atleast_1d(np.asarray(x, dtype=float)) for x in (temp_c, breakdown_v, breakdown_err_v))
    t_b, v_b, e_b = (np.atleast_1d(np.asarray(x, dtype=float)) for x in (to_temp_c, to_breakdown_v,
                                                                        to_breakdown_err_v))
    for name, err in (("breakdown_err_v", e_a), ("to_breakdown_err_v", e_b)):
        if not (np.all(np.isfinite(err)) and np.all(err > 0)):
            raise ModelError("every breakdown error must be a positive number", key=name)
    if t_a.size == 0 or t_b.size == 0:
        raise ModelError("no temperature is measured with both definitions", key="temp_c")
    nearest = np.argmin(np.abs(t_b[:, None] - t_a[None, :]), axis=1)
    matched = np.abs(t_b - t_a[nearest]) <= tolerance_k
    if not matched.any():
        raise ModelError(f"no temperature is measured with both definitions (within {tolerance_k:g} K): "
                         f"{np.unique(t_a).tolist()} C against {np.unique(t_b).tolist()} C", key="temp_c")
    diff = v_b[matched] - v_a[nearest[matched]]
    var = e_b[matched] ** 2 + e_a[nearest[matched]] ** 2
    weights = 1.0 / var
    mean = float(np.sum(weights * diff) / np.sum(weights))
    err = float(np.sqrt(1.0 / np.sum(weights)))
    chi2 = float(np.sum(weights * (diff - mean) ** 2))
    ndf = int(diff.size - 1)
    p_value = float(stats.chi2.sf(chi2, ndf)) if ndf > 0 else float("nan")
    findings = []
    if ndf > 0 and chi2 > ndf:
        err *= float(np.sqrt(chi2 / ndf))
    if ndf > 0 and p_value < 1e-3:
        findings.append(Finding(code="definition_offset_scatter", severity=Severity.WARNING, message=(
            f"the offset between the breakdown definitions scatters more than its errors over {diff.size} "
            f"temperatures (chi2/ndf = {chi2:.1f}/{ndf}, p = {p_value:.2g}): it may depend on temperature; "
            "the error is scaled by sqrt(chi2/ndf)")))
    return DefinitionOffset(offset_v=mean, offset_err_v=err, from_definition=from_definition,
                            to_definition=to_definition, matched_points=int(diff.size), chi2=chi2, ndf=ndf,
                            chi2_p_value=p_value, findings=tuple(findings))
