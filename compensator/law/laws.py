"""Compensation laws: the supply output the DAC must set at each temperature.

Three laws:

* ``constant_overvoltage``: bias at the SiPM ``V(T) = Vbd(T) + Vov``. The
  gain then still follows the cell capacitance, ``G = C(T) Vov / q``
  (common practice).
* ``constant_gain``: bias ``V(T) = Vbd(T) + Vov C(T0) / C(T)`` so that
  ``G = C(T) (V - Vbd) / q`` stays at its value at the breakdown reference
  temperature ``T0``. With a zero capacitance coefficient both laws agree
  (common practice).
* ``constant_response``: the overvoltage that holds the charge of a
  scintillation peak, ``G(Vov, T) PDE(Vov) M(Vov) Y(T)``
  (:mod:`compensator.physics.scintillator`), at its value at ``T0`` and the
  given overvoltage; found by bisection at each temperature. It needs the
  sipm profile's ``scintillator`` section or a ``scintillator`` option.

The laws work on the gain-intercept breakdown (gain against bias
extrapolated to zero): that is the voltage at which the gain is zero. A
profile that holds an I-V breakdown is refused unless the offset between the
two definitions is known (``breakdown.definition_offset_v``, or the
``breakdown_offset_v`` option); the law then adds it and says so in a
:class:`~compensator.findings.Finding`.

The drop across the series filter resistor, ``R I``, can be corrected three
ways (``drop_correction``):

* ``"none"``: the supply output is the target bias; the drop is left.
* ``"modelled"``: the law adds ``R I(V, T)`` from the modelled steady current
  (:func:`compensator.physics.sipm.steady_current_a`) at the target bias and
  an assumed photon rate, so that the bias *at the SiPM* follows the law as
  long as the light level is the assumed one.
* ``"measured"``: the law (and so the lookup table) holds the output for zero
  current; the firmware reads the SiPM current through the board's
  ``current_sense`` channel and adds ``R I_measured`` at run time
  (:meth:`CompensationLaw.measured_output_v`), whatever the light level.

The output is clamped, per temperature, to the tightest of: the supply's
reachable output range, the board's ``max_bias_v`` and ``Vbd(T) +
max_overvoltage_v``. The last limit is applied to the supply output itself, not
to the SiPM bias after the drop: with no current the two are equal, so the
SiPM never sees more than its maximum overvoltage whatever the light level.
The measured correction adds ``R I_measured`` on top of the zero-current law;
the firmware limits it so that even a wrong current reading, with no current
flowing, keeps the SiPM within that maximum
(:func:`compensator.firmware.tables.build_current_correction`).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from compensator.errors import ModelError, Problem, ProfileError
from compensator.findings import Finding, Severity
from compensator.physics.current_sense import CurrentSense
from compensator.physics.scintillator import Scintillator, overvoltage_for_response, response_per_photon
from compensator.physics.sipm import (
    Sipm,
    breakdown_v,
    cell_capacitance_f,
    gain,
    steady_current_a,
)
from compensator.physics.supply import BiasSupply

__all__ = [
    "DROP_CORRECTIONS", "LAW_KINDS", "LIMIT_NAMES", "CompensationLaw", "build_law", "check_law_in_range",
    "constant_gain_law", "constant_overvoltage_law", "constant_response_law",
]

LAW_KINDS = ("constant_overvoltage", "constant_gain", "constant_response")

#: Ways to correct the series-resistor drop.
DROP_CORRECTIONS = ("none", "modelled", "measured")

#: Names of the limits that can clamp a law, in the order they are tested.
LIMIT_NAMES = ("supply minimum output", "supply maximum output", "board max_bias_v", "sipm max_overvoltage_v")

_GAIN_INTERCEPT = "gain_intercept"


@dataclass(frozen=True, kw_only=True)
class CompensationLaw:
    """A compensation law: supply output voltage against temperature.

    Build it with :func:`build_law` (or :func:`constant_overvoltage_law`,
    :func:`constant_gain_law`, :func:`constant_response_law`) from a sipm and
    a board profile.

    Attributes
    ----------
    kind : {"constant_overvoltage", "constant_gain", "constant_response"}
    overvoltage_v : float
        Target overvoltage at the breakdown reference temperature, volt.
    sipm : Sipm
        The device, its breakdown on the gain-intercept definition.
    supply : BiasSupply
    min_temp_c, max_temp_c : float
        Operating range of the board, degree Celsius.
    max_bias_v : float
        Highest output the board may ever apply, volt.
    drop_correction : {"none", "modelled", "measured"}
        How the series-resistor drop is corrected (see the module docstring).
    photon_rate_hz : float
        Photon rate assumed for the modelled current, hertz; with
        ``"measured"`` the light level the budget evaluates at.
    sipm_name, board_name : str
        Profile names (for reports).
    current_sense : CurrentSense or None
        The board's current channel (required for ``"measured"``).
    scintillator : Scintillator or None
        The crystal (required for ``"constant_response"``).
    breakdown_offset_v : float
        What the law added to the profile's breakdown to reach the
        gain-intercept definition, volt (0 when the profile holds it).
    breakdown_offset_err_v : float
        One-sigma uncertainty of that offset, volt.
    findings : tuple of Finding
        What a user should know about the law (e.g. mixed breakdown definitions).
    """

    kind: str
    overvoltage_v: float
    sipm: Sipm
    supply: BiasSupply
    min_temp_c: float
    max_temp_c: float
    max_bias_v: float
    drop_correction: str = "modelled"
    photon_rate_hz: float = 0.0
    sipm_name: str = ""
    board_name: str = ""
    current_sense: CurrentSense | None = None
    scintillator: Scintillator | None = None
    breakdown_offset_v: float = 0.0
    breakdown_offset_err_v: float = 0.0
    findings: tuple = ()

    def __post_init__(self):
        if self.kind not in LAW_KINDS:
            raise ModelError(f"must be one of {', '.join(LAW_KINDS)}, got {self.kind!r}", key="kind")
        if self.drop_correction not in DROP_CORRECTIONS:
            raise ModelError(f"must be one of {', '.join(DROP_CORRECTIONS)}, got {self.drop_correction!r}",
                             key="drop_correction")
        if self.drop_correction == "measured" and self.current_sense is None:
            raise ModelError("'measured' needs a current_sense channel", key="drop_correction")
        if self.kind == "constant_response" and self.scintillator is None:
            raise ModelError("the constant_response law needs a scintillator", key="scintillator")

    @property
    def correct_drop(self) -> bool:
        """Whether the series-resistor drop is corrected at all (modelled or measured)."""
        return self.drop_correction != "none"

    @property
    def ref_temp_c(self) -> float:
        """Temperature where the law's target holds exactly (the breakdown reference), degree Celsius."""
        return self.sipm.breakdown.ref_temp_c

    @property
    def quantity(self) -> str:
        """What the law holds: ``"gain"`` or ``"response"`` (gain x PDE x crosstalk x light yield)."""
        return "response" if self.kind == "constant_response" else "gain"

    def response(self, sipm: Sipm, bias_v, temp_c, light_yield_error_pct_per_k=0.0):
        """What the law holds, for a (possibly perturbed) device at a bias across the SiPM.

        Parameters
        ----------
        sipm : Sipm
            The device (the law's own, or one with calibration errors).
        bias_v : array_like
            Bias across the SiPM, volt.
        temp_c : array_like
            Die temperature, degree Celsius.
        light_yield_error_pct_per_k : array_like
            Error of the scintillator's light-yield coefficient (response law only), percent per kelvin.

        Returns
        -------
        ndarray
            Gain, or electrons per scintillation photon for the response law.
        """
        if self.kind != "constant_response":
            return gain(sipm, bias_v, temp_c)
        ov = np.asarray(bias_v, dtype=float) - breakdown_v(sipm, temp_c)
        return response_per_photon(sipm, self.scintillator, ov, temp_c, light_yield_error_pct_per_k)

    def reference_response(self) -> float:
        """The value the law holds: :meth:`response` of the nominal device at the reference temperature."""
        t0 = self.ref_temp_c
        return float(self.response(self.sipm, breakdown_v(self.sipm, t0) + self.overvoltage_v, t0))

    def target_overvoltage_v(self, temp_c):
        """Overvoltage the law aims for at ``temp_c`` (degree Celsius), volt."""
        t = np.asarray(temp_c, dtype=float)
        if self.kind == "constant_gain":
            ratio = cell_capacitance_f(self.sipm, self.ref_temp_c) / cell_capacitance_f(self.sipm, t)
            return self.overvoltage_v * ratio
        if self.kind == "constant_response":
            return overvoltage_for_response(self.sipm, self.scintillator, self.reference_response(), t,
                                            max_overvoltage_v=2.0 * self.sipm.max_overvoltage_v)
        return np.full(np.shape(t), float(self.overvoltage_v))

    def error_pct_per_v(self, temp_c):
        """Relative change of what the law holds per volt of bias error, percent per volt.

        ``100 / Vov`` for the gain laws (``dG/G = dV/Vov``, common practice);
        for the response law ``100 d ln R / dV`` at the target overvoltage,
        larger because PDE and crosstalk rise with overvoltage too.

        Parameters
        ----------
        temp_c : array_like
            Degree Celsius.

        Returns
        -------
        ndarray
            Percent per volt.
        """
        t = np.asarray(temp_c, dtype=float)
        ov = self.target_overvoltage_v(t)
        if self.kind != "constant_response":
            return 100.0 / ov
        h = 1e-4
        vbd = breakdown_v(self.sipm, t)
        up = self.response(self.sipm, vbd + ov + h, t)
        down = self.response(self.sipm, vbd + ov - h, t)
        return 100.0 * (np.log(up) - np.log(down)) / (2.0 * h)

    def target_bias_v(self, temp_c):
        """Bias the law wants across the SiPM at ``temp_c``, volt."""
        return breakdown_v(self.sipm, temp_c) + self.target_overvoltage_v(temp_c)

    def drop_v(self, temp_c):
        """Series-resistor drop the law itself adds at ``temp_c``, volt.

        The modelled drop with ``"modelled"``; zero with ``"none"`` and with
        ``"measured"`` (there the firmware adds the drop at run time).
        """
        if self.drop_correction != "modelled":
            return np.zeros(np.shape(np.asarray(temp_c, dtype=float)))
        current = steady_current_a(self.sipm, self.target_bias_v(temp_c), temp_c, self.photon_rate_hz)
        return self.supply.drop_v(current)

    def unclamped_output_v(self, temp_c):
        """Supply output before the limits, volt."""
        return self.target_bias_v(temp_c) + self.drop_v(temp_c)

    def output_limits_v(self, temp_c):
        """Lowest and highest allowed supply output at ``temp_c``, volt.

        Returns
        -------
        (ndarray, ndarray)
            Lower and upper limits, volt.
        """
        t = np.asarray(temp_c, dtype=float)
        lo_v, hi_v = self.supply.output_range_v()
        upper = np.minimum(min(hi_v, self.max_bias_v), breakdown_v(self.sipm, t) + self.sipm.max_overvoltage_v)
        return np.full(np.shape(t), lo_v), upper

    def output_v(self, temp_c):
        """Supply output (what the DAC sets) at ``temp_c`` (degree Celsius), clamped, volt."""
        lo, hi = self.output_limits_v(temp_c)
        return np.minimum(np.maximum(self.unclamped_output_v(temp_c), lo), hi)

    def measured_output_v(self, temp_c, current_a):
        """Supply output with the drop of a measured current added, clamped, volt.

        What the ``"measured"`` correction aims for (before any quantisation):
        the zero-current law plus ``R current_a``, within the output limits.

        Parameters
        ----------
        temp_c : array_like
            Degree Celsius.
        current_a : array_like
            SiPM current the firmware measured, ampere.

        Returns
        -------
        ndarray
            Volt.
        """
        lo, hi = self.output_limits_v(temp_c)
        want = self.unclamped_output_v(temp_c) + self.supply.drop_v(current_a)
        return np.minimum(np.maximum(want, lo), hi)

    def limiting(self, temp_c):
        """Name of the limit that clamps the law at each temperature ("" where none does).

        Parameters
        ----------
        temp_c : array_like
            Degree Celsius.

        Returns
        -------
        ndarray of str
        """
        t = np.asarray(temp_c, dtype=float)
        want = self.unclamped_output_v(t)
        lo_v, hi_v = self.supply.output_range_v()
        vbd_max = breakdown_v(self.sipm, t) + self.sipm.max_overvoltage_v
        out = np.full(np.shape(t), "", dtype=object)
        out = np.where(want < lo_v, LIMIT_NAMES[0], out)
        out = np.where(want > hi_v, LIMIT_NAMES[1], out)
        out = np.where((want > self.max_bias_v) & (out == ""), LIMIT_NAMES[2], out)
        out = np.where((want > vbd_max) & (out == ""), LIMIT_NAMES[3], out)
        return out

    def slope_v_per_k(self, temp_c):
        """Slope of the (unclamped) output against temperature, volt per kelvin."""
        t = np.asarray(temp_c, dtype=float)
        h = 0.01
        return (self.unclamped_output_v(t + h) - self.unclamped_output_v(t - h)) / (2 * h)


def _on_gain_intercept(sipm_profile, breakdown_offset_v):
    """The device on the gain-intercept breakdown, the offset applied, its uncertainty and the findings."""
    device = sipm_profile.device
    bd = device.breakdown
    if breakdown_offset_v is None and bd.definition == _GAIN_INTERCEPT:
        return device, 0.0, 0.0, ()
    if breakdown_offset_v is not None:
        offset, err, origin = float(breakdown_offset_v), 0.0, "given"
        if not np.isfinite(offset) or abs(offset) > 5.0:
            raise ModelError(f"must be a number within +-5 V, got {breakdown_offset_v!r}", key="breakdown_offset_v")
    elif bd.definition_offset_v is not None:
        offset, err, origin = bd.definition_offset_v, bd.definition_offset_err_v, "from the profile"
    else:
        raise ModelError(
            f"{sipm_profile.name} holds the {bd.definition} breakdown, but a gain law needs the gain-intercept "
            "breakdown (they differ by tens to hundreds of millivolts); give breakdown.definition_offset_v in the "
            "profile (or the law's breakdown_offset_v), or recalibrate from gain scans", key="breakdown.definition")
    if bd.definition == _GAIN_INTERCEPT:
        findings = (Finding(code="breakdown_offset_applied", severity=Severity.WARNING,
                            message=f"the law adds {1e3 * offset:+.1f} mV to {sipm_profile.name}'s gain-intercept "
                                    "breakdown (given)"),)
    else:
        findings = (Finding(code="breakdown_definitions_mixed", severity=Severity.WARNING,
                            message=f"{sipm_profile.name} holds the {bd.definition} breakdown; the law adds "
                                    f"{1e3 * offset:+.1f} mV (+-{1e3 * err:.1f} mV, {origin}) to reach the "
                                    "gain-intercept breakdown"),)
    shifted = replace(bd, breakdown_v_at_ref=bd.breakdown_v_at_ref + offset, definition=_GAIN_INTERCEPT,
                      definition_offset_v=None, definition_offset_err_v=0.0)
    return replace(device, breakdown=shifted), offset, err, findings


def build_law(sipm_profile, board_profile, overvoltage_v, *, kind="constant_overvoltage", photon_rate_hz=0.0,
              drop_correction="modelled", scintillator=None, breakdown_offset_v=None) -> CompensationLaw:
    """Build a compensation law from a sipm and a board profile.

    Parameters
    ----------
    sipm_profile : SipmProfile
    board_profile : BoardProfile
    overvoltage_v : float
        Target overvoltage at the breakdown reference temperature, volt; must
        lie within the sipm's ``min_overvoltage_v`` .. ``max_overvoltage_v``.
    kind : {"constant_overvoltage", "constant_gain", "constant_response"}
        The law.
    photon_rate_hz : float
        Photon rate (hertz) for the modelled current; zero for dark operation.
        With ``"measured"``, the light level the gain-error budget assumes.
    drop_correction : {"none", "modelled", "measured"}
        How to correct the series-resistor drop; ``"measured"`` needs the
        board's ``current_sense`` section.
    scintillator : Scintillator, optional
        The crystal for ``"constant_response"``; default the sipm profile's
        ``scintillator`` section.
    breakdown_offset_v : float, optional
        Volts to add to the profile's breakdown to reach the gain-intercept
        definition; default the profile's ``breakdown.definition_offset_v``
        when it holds an I-V breakdown, else none. Either way the law carries
        a finding naming the offset.

    Returns
    -------
    CompensationLaw

    Raises
    ------
    ModelError
        A target outside the device limits, an unknown kind or correction, an
        I-V breakdown without a known offset, or the response law without a
        scintillator.
    ProfileError
        ``"measured"`` on a board without ``current_sense`` (names the board file).
    """
    if kind not in LAW_KINDS:
        raise ModelError(f"must be one of {', '.join(LAW_KINDS)}, got {kind!r}", key="kind")
    if drop_correction not in DROP_CORRECTIONS:
        raise ModelError(f"must be one of {', '.join(DROP_CORRECTIONS)}, got {drop_correction!r}",
                         key="drop_correction")
    limits = sipm_profile.device
    ov = float(overvoltage_v)
    if not np.isfinite(ov) or not limits.min_overvoltage_v <= ov <= limits.max_overvoltage_v:
        raise ModelError(f"{ov:g} V is outside {sipm_profile.name}'s limits {limits.min_overvoltage_v:g} to "
                         f"{limits.max_overvoltage_v:g} V", key="overvoltage_v")
    if not np.isfinite(photon_rate_hz) or photon_rate_hz < 0:
        raise ModelError(f"must be a non-negative number, got {photon_rate_hz!r}", key="photon_rate_hz")
    current_sense = getattr(board_profile, "current_sense", None)
    if drop_correction == "measured" and current_sense is None:
        raise ProfileError(Problem(str(board_profile.source), 0, "current_sense",
                                   "missing section: the measured drop correction needs the board's SiPM current "
                                   "channel (or use the modelled correction)"))
    if scintillator is None:
        scintillator = getattr(sipm_profile, "scintillator", None)
    if kind == "constant_response" and scintillator is None:
        raise ProfileError(Problem(str(sipm_profile.source), 0, "scintillator",
                                   "missing section: the constant_response law needs the crystal's light-yield "
                                   "coefficient"))
    sipm, offset, offset_err, findings = _on_gain_intercept(sipm_profile, breakdown_offset_v)
    return CompensationLaw(kind=kind, overvoltage_v=ov, sipm=sipm, supply=board_profile.supply,
                           min_temp_c=float(board_profile.min_temp_c), max_temp_c=float(board_profile.max_temp_c),
                           max_bias_v=float(board_profile.max_bias_v), drop_correction=drop_correction,
                           photon_rate_hz=float(photon_rate_hz), sipm_name=sipm_profile.name,
                           board_name=board_profile.name, current_sense=current_sense,
                           scintillator=scintillator if kind == "constant_response" else None,
                           breakdown_offset_v=offset, breakdown_offset_err_v=offset_err, findings=findings)


def constant_overvoltage_law(sipm_profile, board_profile, overvoltage_v, **options) -> CompensationLaw:
    """Constant-overvoltage law ``V = Vbd(T) + Vov`` (:func:`build_law` with that kind).

    Parameters
    ----------
    sipm_profile : SipmProfile
    board_profile : BoardProfile
    overvoltage_v : float
        Volt.
    **options
        Keyword options of :func:`build_law` other than ``kind``.

    Returns
    -------
    CompensationLaw
    """
    return build_law(sipm_profile, board_profile, overvoltage_v, kind="constant_overvoltage", **options)


def constant_gain_law(sipm_profile, board_profile, overvoltage_v, **options) -> CompensationLaw:
    """Constant-gain law ``V = Vbd(T) + Vov C(T0)/C(T)`` (:func:`build_law` with that kind).

    Parameters
    ----------
    sipm_profile : SipmProfile
    board_profile : BoardProfile
    overvoltage_v : float
        Overvoltage at the breakdown reference temperature, volt.
    **options
        Keyword options of :func:`build_law` other than ``kind``.

    Returns
    -------
    CompensationLaw
    """
    return build_law(sipm_profile, board_profile, overvoltage_v, kind="constant_gain", **options)


def constant_response_law(sipm_profile, board_profile, overvoltage_v, **options) -> CompensationLaw:
    """Constant-response law: gain x PDE x crosstalk x light yield held (:func:`build_law` with that kind).

    Parameters
    ----------
    sipm_profile : SipmProfile
    board_profile : BoardProfile
    overvoltage_v : float
        Overvoltage at the breakdown reference temperature, volt.
    **options
        Keyword options of :func:`build_law` other than ``kind``.

    Returns
    -------
    CompensationLaw
    """
    return build_law(sipm_profile, board_profile, overvoltage_v, kind="constant_response", **options)


def check_law_in_range(law: CompensationLaw, *, step_k: float = 0.1) -> None:
    """Raise if the law is clamped anywhere in its operating range.

    Parameters
    ----------
    law : CompensationLaw
    step_k : float
        Temperature step of the scan, kelvin.

    Raises
    ------
    ModelError
        With key ``overvoltage_v``, naming the limit and the temperatures where it clamps.
    """
    temps = np.linspace(law.min_temp_c, law.max_temp_c, int(round((law.max_temp_c - law.min_temp_c) / step_k)) + 1)
    names = law.limiting(temps)
    hit = names != ""
    if np.any(hit):
        first = str(names[hit][0])
        where = temps[names == first]
        want = law.unclamped_output_v(where)
        raise ModelError(f"the law needs {want.min():.3f} to {want.max():.3f} V from {where.min():g} to "
                         f"{where.max():g} C, beyond the {first}; lower --overvoltage-v or use another board",
                         key="overvoltage_v")
