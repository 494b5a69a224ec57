"""Compensation laws: the supply output the DAC must set at each temperature.

Two laws (common practice):

* ``constant_overvoltage``: bias at the SiPM ``V(T) = Vbd(T) + Vov``. The
  gain then still follows the cell capacitance, ``G = C(T) Vov / q``.
* ``constant_gain``: bias ``V(T) = Vbd(T) + Vov C(T0) / C(T)`` so that
  ``G = C(T) (V - Vbd) / q`` stays at its value at the breakdown reference
  temperature ``T0``. With a zero capacitance coefficient both laws agree.

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

from dataclasses import dataclass

import numpy as np

from compensator.errors import ModelError, Problem, ProfileError
from compensator.physics.current_sense import CurrentSense
from compensator.physics.sipm import (
    Sipm,
    breakdown_v,
    cell_capacitance_f,
    steady_current_a,
)
from compensator.physics.supply import BiasSupply

LAW_KINDS = ("constant_overvoltage", "constant_gain")

#: Ways to correct the series-resistor drop.
DROP_CORRECTIONS = ("none", "modelled", "measured")

#: Names of the limits that can clamp a law, in the order they are tested.
LIMIT_NAMES = ("supply minimum output", "supply maximum output", "board max_bias_v", "sipm max_overvoltage_v")


@dataclass(frozen=True)
class CompensationLaw:
    """A compensation law: supply output voltage against temperature.

    Build it with :func:`build_law` (or :func:`constant_overvoltage_law`,
    :func:`constant_gain_law`) from a sipm and a board profile.

    Attributes
    ----------
    kind : {"constant_overvoltage", "constant_gain"}
    overvoltage_v : float
        Target overvoltage at the breakdown reference temperature, volt.
    sipm : Sipm
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

    def __post_init__(self):
        if self.drop_correction not in DROP_CORRECTIONS:
            raise ModelError(f"drop_correction must be one of {', '.join(DROP_CORRECTIONS)}, "
                             f"got {self.drop_correction!r}")
        if self.drop_correction == "measured" and self.current_sense is None:
            raise ModelError("drop_correction 'measured' needs a current_sense channel")

    @property
    def correct_drop(self) -> bool:
        """Whether the series-resistor drop is corrected at all (modelled or measured)."""
        return self.drop_correction != "none"

    def target_overvoltage_v(self, temp_c):
        """Overvoltage the law aims for at ``temp_c`` (degree Celsius), volt."""
        t = np.asarray(temp_c, dtype=float)
        if self.kind == "constant_gain":
            ratio = cell_capacitance_f(self.sipm, self.sipm.breakdown.ref_temp_c) / cell_capacitance_f(self.sipm, t)
            return self.overvoltage_v * ratio
        return np.full(np.shape(t), float(self.overvoltage_v))

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


def build_law(sipm_profile, board_profile, overvoltage_v, kind="constant_overvoltage", correct_drop=True,
              photon_rate_hz=0.0, drop_correction=None) -> CompensationLaw:
    """Build a compensation law from a sipm and a board profile.

    Parameters
    ----------
    sipm_profile : SipmProfile
    board_profile : BoardProfile
    overvoltage_v : float
        Target overvoltage at the breakdown reference temperature, volt; must
        lie within the sipm's ``min_overvoltage_v`` .. ``max_overvoltage_v``.
    kind : {"constant_overvoltage", "constant_gain"}
    correct_drop : bool
        Add the modelled series-resistor drop to the output (used only when
        ``drop_correction`` is not given: True means ``"modelled"``, False ``"none"``).
    photon_rate_hz : float
        Photon rate (hertz) for the modelled current; zero for dark operation.
        With ``"measured"``, the light level the gain-error budget assumes.
    drop_correction : {"none", "modelled", "measured"}, optional
        How to correct the series-resistor drop; ``"measured"`` needs the
        board's ``current_sense`` section.

    Returns
    -------
    CompensationLaw

    Raises
    ------
    ModelError
        A target outside the device limits or an unknown kind or correction.
    ProfileError
        ``"measured"`` on a board without ``current_sense`` (names the board file).
    """
    if kind not in LAW_KINDS:
        raise ModelError(f"law kind must be one of {', '.join(LAW_KINDS)}, got {kind!r}")
    sipm = sipm_profile.device
    ov = float(overvoltage_v)
    if not np.isfinite(ov) or not sipm.min_overvoltage_v <= ov <= sipm.max_overvoltage_v:
        raise ModelError(f"overvoltage_v: {ov:g} V is outside {sipm_profile.name}'s limits "
                         f"{sipm.min_overvoltage_v:g} to {sipm.max_overvoltage_v:g} V")
    if not np.isfinite(photon_rate_hz) or photon_rate_hz < 0:
        raise ModelError(f"photon_rate_hz must be a non-negative number, got {photon_rate_hz!r}")
    if drop_correction is None:
        drop_correction = "modelled" if correct_drop else "none"
    current_sense = getattr(board_profile, "current_sense", None)
    if drop_correction == "measured" and current_sense is None:
        raise ProfileError(Problem(str(board_profile.source), 0, "current_sense",
                                   "missing section: the measured drop correction needs the board's SiPM current "
                                   "channel (or use the modelled correction)"))
    return CompensationLaw(kind=kind, overvoltage_v=ov, sipm=sipm, supply=board_profile.supply,
                           min_temp_c=float(board_profile.min_temp_c), max_temp_c=float(board_profile.max_temp_c),
                           max_bias_v=float(board_profile.max_bias_v), drop_correction=drop_correction,
                           photon_rate_hz=float(photon_rate_hz), sipm_name=sipm_profile.name,
                           board_name=board_profile.name, current_sense=current_sense)


def constant_overvoltage_law(sipm_profile, board_profile, overvoltage_v, correct_drop=True, photon_rate_hz=0.0,
                             drop_correction=None):
    """Constant-overvoltage law ``V = Vbd(T) + Vov`` (see :func:`build_law` for the parameters).

    Parameters
    ----------
    sipm_profile, board_profile : SipmProfile, BoardProfile
    overvoltage_v : float
        Volt.
    correct_drop : bool
    photon_rate_hz : float
        Hertz.
    drop_correction : {"none", "modelled", "measured"}, optional

    Returns
    -------
    CompensationLaw
    """
    return build_law(sipm_profile, board_profile, overvoltage_v, "constant_overvoltage", correct_drop, photon_rate_hz,
                     drop_correction)


def constant_gain_law(sipm_profile, board_profile, overvoltage_v, correct_drop=True, photon_rate_hz=0.0,
                      drop_correction=None):
    """Constant-gain law ``V = Vbd(T) + Vov C(T0)/C(T)`` (see :func:`build_law` for the parameters).

    Parameters
    ----------
    sipm_profile, board_profile : SipmProfile, BoardProfile
    overvoltage_v : float
        Overvoltage at the breakdown reference temperature, volt.
    correct_drop : bool
    photon_rate_hz : float
        Hertz.
    drop_correction : {"none", "modelled", "measured"}, optional

    Returns
    -------
    CompensationLaw
    """
    return build_law(sipm_profile, board_profile, overvoltage_v, "constant_gain", correct_drop, photon_rate_hz,
                     drop_correction)


def check_law_in_range(law: CompensationLaw, step_k: float = 0.1) -> None:
    """Raise if the law is clamped anywhere in its operating range.

    Parameters
    ----------
    law : CompensationLaw
    step_k : float
        Temperature step of the scan, kelvin.

    Raises
    ------
    ModelError
        Naming the limit and the temperatures where it clamps.
    """
    temps = np.linspace(law.min_temp_c, law.max_temp_c, int(round((law.max_temp_c - law.min_temp_c) / step_k)) + 1)
    names = law.limiting(temps)
    hit = names != ""
    if np.any(hit):
        first = str(names[hit][0])
        where = temps[names == first]
        want = law.unclamped_output_v(where)
        raise ModelError(f"the law needs {want.min():.3f} to {want.max():.3f} V from {where.min():g} to "
                         f"{where.max():g} C, beyond the {first}; lower --overvoltage-v or use another board")
