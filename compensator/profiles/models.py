"""Profile objects: validated, frozen, ready for the numerical core."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from compensator.errors import ModelError, ProfileError
from compensator.physics.bias_readback import BiasReadback
from compensator.physics.current_sense import CurrentSense
from compensator.physics.sensors import FrontEnd, NtcSensor, RtdSensor, SteinhartHart, TemperatureChannel
from compensator.physics.scintillator import Scintillator
from compensator.physics.sipm import Breakdown, Sipm
from compensator.physics.supply import BiasSupply, Dac
from compensator.physics.thermal import CoolerParams
from compensator.profiles.loader import RawProfile, read_raw_profile

__all__ = ["BoardProfile", "SipmProfile", "ThermalProfile", "load_board", "load_profile", "load_sipm", "load_thermal"]


@dataclass(frozen=True)
class _Meta:
    name: str
    description: str
    source: str
    sha256: str
    values: dict = field(repr=False, compare=False)


@dataclass(frozen=True)
class SipmProfile(_Meta):
    """A ``sipm`` profile: metadata plus the :class:`~compensator.physics.sipm.Sipm` model.

    Attributes
    ----------
    device : Sipm
    scintillator : Scintillator or None
        The crystal the SiPM reads, when the profile describes one (for the
        ``constant_response`` law).
    """

    device: Sipm = None
    scintillator: Scintillator | None = None


@dataclass(frozen=True)
class BoardProfile(_Meta):
    """A ``board`` profile.

    Attributes
    ----------
    temperature : TemperatureChannel
        Sensor plus divider and ADC.
    supply : BiasSupply
        DAC, output network, limits and series resistor.
    control_rate_hz, min_temp_c, max_temp_c, max_bias_v : float
    safe_dac_code : int
        DAC code applied when the temperature reading is invalid.
    current_sense : CurrentSense or None
        The SiPM current channel, when the board has one.
    bias_readback : BiasReadback or None
        The supply-output measurement, when the board has one (without it
        the bias is set open-loop).
    electronics_ref_temp_c : float
        Temperature at which the electronics' tolerances hold, degree Celsius.
    electronics_min_temp_c, electronics_max_temp_c : float
        Temperature of the electronics while the SiPM is at ``min_temp_c`` and
        ``max_temp_c``, degree Celsius (linear in between).
    """

    temperature: TemperatureChannel = None
    supply: BiasSupply = None
    control_rate_hz: float = 0.0
    min_temp_c: float = 0.0
    max_temp_c: float = 0.0
    max_bias_v: float = 0.0
    safe_dac_code: int = 0
    current_sense: CurrentSense | None = None
    bias_readback: BiasReadback | None = None
    electronics_ref_temp_c: float = 25.0
    electronics_min_temp_c: float | None = None
    electronics_max_temp_c: float | None = None

    def electronics_temp_c(self, temp_c):
        """Temperature of the board's electronics while the SiPM is at ``temp_c``, degree Celsius.

        Parameters
        ----------
        temp_c : array_like
            SiPM temperature, degree Celsius.

        Returns
        -------
        ndarray
            Linear between the two ends of the operating range (and beyond it).
        """
        t = np.asarray(temp_c, dtype=float)
        lo = self.min_temp_c if self.electronics_min_temp_c is None else self.electronics_min_temp_c
        hi = self.max_temp_c if self.electronics_max_temp_c is None else self.electronics_max_temp_c
        return lo + (t - self.min_temp_c) * ((hi - lo) / (self.max_temp_c - self.min_temp_c))


@dataclass(frozen=True)
class ThermalProfile(_Meta):
    """A ``thermal`` profile: metadata plus :class:`~compensator.physics.thermal.CoolerParams`."""

    cooler: CoolerParams = None


def _meta(raw: RawProfile) -> dict:
    v = raw.values
    return dict(name=v["name"], description=v.get("description", ""), source=raw.path,
                sha256=raw.sha256, values=v)


def _build_sipm(raw: RawProfile) -> SipmProfile:
    v = raw.values
    bd, cell, pde, dark, xt, lim = (v[k] for k in ("breakdown", "cell", "pde", "dark", "crosstalk", "limits"))
    if lim["min_overvoltage_v"] >= lim["max_overvoltage_v"]:
        raise ProfileError(raw.problem("limits.min_overvoltage_v", "must be below limits.max_overvoltage_v"))
    if xt["model"] == "branching_poisson" and xt["probability"] >= 1.0 - np.exp(-1.0):
        raise ProfileError(raw.problem("crosstalk.probability", "must be below 1 - 1/e = 0.632 for the "
                                       "branching_poisson model (the mean diverges at lambda = 1)"))
    device = Sipm(
        breakdown=Breakdown(bd["breakdown_v_at_ref"], bd["ref_temp_c"], bd["tempco_mv_per_k"],
                            bd["curvature_mv_per_k2"], bd["breakdown_err_v"], bd["tempco_err_mv_per_k"],
                            definition=bd["definition"], definition_offset_v=bd["definition_offset_v"],
                            definition_offset_err_v=bd["definition_offset_err_v"]),
        cell_capacitance_f=cell["capacitance_f"], cell_count=cell["count"],
        capacitance_tempco_ppm_per_k=cell["capacitance_tempco_ppm_per_k"], recovery_time_s=cell["recovery_time_s"],
        pde_max_fraction=pde["max_fraction"], pde_saturation_overvoltage_v=pde["saturation_overvoltage_v"],
        dark_rate_hz=dark["rate_hz"], dark_ref_temp_c=dark["ref_temp_c"],
        dark_ref_overvoltage_v=dark["ref_overvoltage_v"], dark_doubling_temp_k=dark["doubling_temp_k"],
        dark_overvoltage_exponent=dark["overvoltage_exponent"],
        crosstalk_probability=xt["probability"], crosstalk_ref_overvoltage_v=xt["ref_overvoltage_v"],
        crosstalk_overvoltage_exponent=xt["overvoltage_exponent"], crosstalk_model=xt["model"],
        max_overvoltage_v=lim["max_overvoltage_v"], min_overvoltage_v=lim["min_overvoltage_v"],
        max_current_a=lim["max_current_a"],
    )
    scintillator = None
    if "scintillator" in v:
        sc = v["scintillator"]
        scintillator = Scintillator(
            ref_temp_c=sc["ref_temp_c"], light_yield_tempco_pct_per_k=sc["light_yield_tempco_pct_per_k"],
            light_yield_curvature_pct_per_k2=sc["light_yield_curvature_pct_per_k2"],
            light_yield_tempco_err_pct_per_k=sc["light_yield_tempco_err_pct_per_k"])
    return SipmProfile(**_meta(raw), device=device, scintillator=scintillator)


def _build_board(raw: RawProfile) -> BoardProfile:
    v = raw.values
    ts, fe, adc, dac, sup, ctl, lim = (v[k] for k in (
        "temperature_sensor", "front_end", "adc", "dac", "supply", "control", "limits"))
    problems = []
    if ts["type"] == "rtd":
        sensor = RtdSensor(ts["r0_ohm"], ts["tolerance_class"], ts["self_heating_k"], ts["sensor_to_die_k"],
                           ts["time_constant_s"], ts["die_to_sensor_time_constant_s"])
    else:
        sh = None
        if ts["type"] == "ntc_steinhart_hart":
            sh = SteinhartHart(ts["sh_a_per_k"], ts["sh_b_per_k"], ts["sh_c_per_k"])
        sensor = NtcSensor(ts["r25_ohm"], ts.get("beta_k"), sh, ts["r25_tolerance_pct"], ts["beta_tolerance_pct"],
                           ts["self_heating_k"], ts["sensor_to_die_k"], ts["time_constant_s"],
                           ts["die_to_sensor_time_constant_s"])
    front_end = FrontEnd(fe["sensor_position"], fe["reference_resistor_ohm"], fe["excitation_v"], fe["ratiometric"],
                         adc["bits"], adc["reference_v"], fe["reference_resistor_tolerance_pct"],
                         adc["reference_tolerance_pct"], fe["excitation_tolerance_pct"],
                         reference_resistor_tempco_ppm_per_k=fe["reference_resistor_tempco_ppm_per_k"],
                         adc_reference_tempco_ppm_per_k=adc["reference_tempco_ppm_per_k"],
                         excitation_tempco_ppm_per_k=fe["excitation_tempco_ppm_per_k"],
                         adc_offset_lsb=adc["offset_lsb"], adc_gain_error_pct=adc["gain_error_pct"],
                         adc_inl_lsb=adc["inl_lsb"])
    channel = TemperatureChannel(sensor, front_end)
    if lim["min_temp_c"] >= lim["max_temp_c"]:
        problems.append(raw.problem("limits.min_temp_c", "must be below limits.max_temp_c"))
    if sup["min_output_v"] >= sup["max_output_v"]:
        problems.append(raw.problem("supply.min_output_v", "must be below supply.max_output_v"))
    try:
        supply = BiasSupply(
            Dac(dac["bits"], dac["reference_v"], dac["reference_tolerance_pct"], dac["reference_tempco_ppm_per_k"],
                dac["offset_lsb"], dac["gain_error_pct"], dac["inl_lsb"]), sup["topology"],
            feedback_v=sup.get("feedback_v", 1.25), r1_ohm=sup.get("r1_ohm", 0.0), r2_ohm=sup.get("r2_ohm", 1.0),
            r3_ohm=sup.get("r3_ohm", 1.0), gain_v_per_v=sup.get("gain_v_per_v", 1.0),
            offset_v=sup.get("offset_v", 0.0), min_output_v=sup["min_output_v"], max_output_v=sup["max_output_v"],
            series_resistor_ohm=sup["series_resistor_ohm"], filter_capacitance_f=sup["filter_capacitance_f"],
            regulator_time_constant_s=sup["regulator_time_constant_s"],
            resistor_tolerance_pct=sup["resistor_tolerance_pct"],
            resistor_tempco_ppm_per_k=sup["resistor_tempco_ppm_per_k"],
            resistor_tracking_ppm_per_k=sup["resistor_tracking_ppm_per_k"],
            feedback_tolerance_pct=sup.get("feedback_tolerance_pct", 0.0),
            feedback_tempco_ppm_per_k=sup.get("feedback_tempco_ppm_per_k", 0.0),
        )
    except ModelError as exc:
        raise ProfileError([*problems, raw.problem(f"supply.{exc.key or 'topology'}", exc.reason)]) from None
    if problems:
        raise ProfileError(problems)
    # The sensor must read inside the ADC range over the whole operating range.
    temps_c = np.linspace(lim["min_temp_c"], lim["max_temp_c"], 64)
    try:
        codes = channel.adc_code(temps_c)
    except ModelError as exc:
        raise ProfileError(raw.problem("limits.min_temp_c",
                                       f"operating range outside the sensor model: {exc.reason}")) from None
    if codes.min() <= 0 or codes.max() >= front_end.full_scale_code:
        problems.append(raw.problem("front_end.reference_resistor_ohm",
                                    "the divider drives the ADC to a rail inside the operating temperature range"))
    if np.any(np.diff(codes) == 0) and len(np.unique(codes)) < 16:
        problems.append(raw.problem("adc.bits", "fewer than 16 ADC codes span the operating temperature range"))
    lo_v, hi_v = supply.output_range_v()
    if lo_v >= hi_v:
        problems.append(raw.problem("supply.min_output_v", "the network's output range is empty within the limits"))
    if lim["max_bias_v"] <= lo_v:
        problems.append(raw.problem("limits.max_bias_v", f"{lim['max_bias_v']:g} V is not above the lowest output "
                                    f"the supply reaches ({lo_v:.4g} V): no bias would be allowed"))
    safe = lim["safe_dac_code"]
    if safe is None:
        safe = int(np.argmin(supply.output_v([0, supply.dac.full_scale_code]))) * supply.dac.full_scale_code
    elif safe > supply.dac.full_scale_code:
        problems.append(raw.problem("limits.safe_dac_code", f"exceeds the DAC's largest code {supply.dac.full_scale_code}"))
    el = v.get("electronics", {"ref_temp_c": 25.0, "min_temp_c": None, "max_temp_c": None})
    current_sense = None
    if "current_sense" in v:
        cs = v["current_sense"]
        current_sense = CurrentSense(cs["adc_bits"], cs["reference_v"], cs["sense_gain_v_per_a"],
                                     cs["reference_tolerance_pct"], cs["gain_tolerance_pct"], cs["offset_a"],
                                     cs["gain_tempco_ppm_per_k"], cs["offset_drift_a_per_k"])
    bias_readback = None
    if "bias_readback" in v:
        rb = v["bias_readback"]
        bias_readback = BiasReadback(
            adc_bits=rb["adc_bits"], reference_v=rb["reference_v"], divider_ratio_v_per_v=rb["divider_ratio_v_per_v"],
            reference_tolerance_pct=rb["reference_tolerance_pct"], divider_tolerance_pct=rb["divider_tolerance_pct"],
            offset_v=rb["offset_v"], filter_time_constant_s=rb["filter_time_constant_s"])
        highest_v = min(hi_v, lim["max_bias_v"])
        if bias_readback.full_scale_v < highest_v:
            problems.append(raw.problem(
                "bias_readback.divider_ratio_v_per_v",
                f"the read-back saturates at {bias_readback.full_scale_v:.4g} V, below the highest output "
                f"{highest_v:.4g} V the board can set"))
    if problems:
        raise ProfileError(problems)
    return BoardProfile(**_meta(raw), temperature=channel, supply=supply, control_rate_hz=ctl["rate_hz"],
                        min_temp_c=lim["min_temp_c"], max_temp_c=lim["max_temp_c"], max_bias_v=lim["max_bias_v"],
                        safe_dac_code=int(safe), current_sense=current_sense,
                        bias_readback=bias_readback, electronics_ref_temp_c=el["ref_temp_c"],
                        electronics_min_temp_c=el["min_temp_c"], electronics_max_temp_c=el["max_temp_c"])


def _build_thermal(raw: RawProfile) -> ThermalProfile:
    v = raw.values
    p, cp, hs, se, amb, ctl, lim = (v[k] for k in (
        "peltier", "cold_plate", "hot_side", "sensor", "ambient", "control", "limits"))
    cooler = CoolerParams(
        seebeck_v_per_k=p["seebeck_v_per_k"], resistance_ohm=p["resistance_ohm"],
        conductance_w_per_k=p["conductance_w_per_k"], max_current_a=p["max_current_a"],
        cold_heat_capacity_j_per_k=cp["heat_capacity_j_per_k"], cold_heat_load_w=cp["heat_load_w"],
        cold_leak_conductance_w_per_k=cp["leak_conductance_w_per_k"],
        hot_heat_capacity_j_per_k=hs["heat_capacity_j_per_k"], sink_resistance_k_per_w=hs["sink_resistance_k_per_w"],
        sensor_time_constant_s=se["time_constant_s"], sensor_dead_time_s=se["dead_time_s"],
        ambient_temp_c=amb["temp_c"], ambient_relative_humidity_pct=amb["relative_humidity_pct"],
        control_rate_hz=ctl["rate_hz"], setpoint_temp_c=ctl["setpoint_temp_c"],
        max_hot_temp_c=lim["max_hot_temp_c"], dew_margin_k=lim["dew_margin_k"],
    )
    if lim["max_hot_temp_c"] <= amb["temp_c"]:
        raise ProfileError(raw.problem("limits.max_hot_temp_c", "must be above ambient.temp_c"))
    return ThermalProfile(**_meta(raw), cooler=cooler)


def _build_scenario(raw: RawProfile):
    from compensator.profiles.scenario import build_scenario

    return build_scenario(raw)


_BUILDERS = {"sipm": _build_sipm, "board": _build_board, "thermal": _build_thermal, "scenario": _build_scenario}


def load_profile(path: str | Path, kind: str | None = None):
    """Load and validate a profile.

    Parameters
    ----------
    path : str or path-like
        YAML file.
    kind : {"sipm", "board", "thermal", "scenario"}, optional
        Expected kind; another kind is an error.

    Returns
    -------
    SipmProfile, BoardProfile, ThermalProfile or ScenarioProfile

    Raises
    ------
    ProfileError
        One problem per line: ``FILE:LINE: key.path: reason``.
    """
    raw = read_raw_profile(path, kind)
    return _BUILDERS[raw.kind](raw)


def load_sipm(path) -> SipmProfile:
    """Load a ``sipm`` profile (see :func:`load_profile`)."""
    return load_profile(path, "sipm")


def load_board(path) -> BoardProfile:
    """Load a ``board`` profile (see :func:`load_profile`)."""
    return load_profile(path, "board")


def load_thermal(path) -> ThermalProfile:
    """Load a ``thermal`` profile (see :func:`load_profile`)."""
    return load_profile(path, "thermal")
