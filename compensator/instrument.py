"""One instrument end to end: a SiPM type on a board, with its law, table, budget and loops.

This is the library behind ``compensator demo``: each function makes the
decisions of one step of the main job and returns a frozen record; the
command only loads the profiles, calls these, renders and prints. Nothing
here reads or writes files (:func:`render_table_files` returns the text of
the C files; the edge writes them).

Every headline figure is computed over every ADC code of the board's
operating range (not over the rows a command prints) and says its
statistic: ``*_ptp_pct`` is a peak-to-peak gain swing, ``*_max_abs_pct``
the largest absolute gain error, both against the gain at 25 C.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from compensator.findings import Finding

__all__ = [
    "NOMINAL_TEMP_C",
    "DEFAULT_TABLE_BOUND_PCT",
    "DEFAULT_PHOTON_RATES_HZ",
    "Characterisation",
    "GainDrift",
    "BudgetTerm",
    "BudgetSummary",
    "TableSummary",
    "LightError",
    "LoopSummary",
    "InstrumentReport",
    "characterise_breakdown",
    "gain_drift",
    "evaluate_instrument",
    "render_table_files",
    "tune_loops",
    "sipm_operating_findings",
    "describe_temperature_channel",
]

#: Temperature whose gain every gain error is measured against, degree Celsius.
NOMINAL_TEMP_C = 25.0
#: Gain-error bound the instrument's lookup table is sized for, percent.
DEFAULT_TABLE_BOUND_PCT = 0.05
#: Light levels at which the drop corrections are compared, hertz.
DEFAULT_PHOTON_RATES_HZ = (0.0, 1e6, 1e7, 1e8)
#: Monte Carlo samples of the instrument's budget.
BUDGET_SAMPLES = 2000
#: Ms bound of the robust loop tuning (Astrom and Hagglund's robust value).
LOOP_MS = 1.4


@dataclass(frozen=True, kw_only=True)
class Characterisation:
    """Breakdown and tempco recovered from synthetic bench I-V curves, beside the truth.

    Attributes
    ----------
    sipm : str
        Profile name of the sensor type.
    curve_count : int
        Number of curves.
    temp_c, breakdown_v, breakdown_err_v, true_breakdown_v : ndarray
        Per curve: temperature, breakdown found (volt), its 1-sigma
        error, statistical and systematic (volt), and the truth (volt).
    ref_temp_c : float
        Reference temperature of the fit, degree Celsius.
    breakdown_v_at_ref, breakdown_err_v_at_ref, true_breakdown_v_at_ref : float
        Breakdown at the reference temperature, its 1-sigma error and the truth, volt.
    breakdown_stat_err_v_at_ref, breakdown_sys_err_v_at_ref : float
        The two parts of ``breakdown_err_v_at_ref`` (added in quadrature), volt:
        the fit's statistical error, and the breakdown method's systematic
        error, common to every curve, which does not average down.
    tempco_mv_per_k, tempco_err_mv_per_k, true_tempco_mv_per_k : float
        Temperature coefficient, its 1-sigma error (statistical: a part common
        to every curve does not move the slope) and the truth, mV/K.
    seed : int
        Seed of the synthetic curves.
    """

    sipm: str
    curve_count: int
    temp_c: np.ndarray
    breakdown_v: np.ndarray
    breakdown_err_v: np.ndarray
    true_breakdown_v: np.ndarray
    ref_temp_c: float
    breakdown_v_at_ref: float
    breakdown_err_v_at_ref: float
    breakdown_stat_err_v_at_ref: float
    breakdown_sys_err_v_at_ref: float
    true_breakdown_v_at_ref: float
    tempco_mv_per_k: float
    tempco_err_mv_per_k: float
    true_tempco_mv_per_k: float
    seed: int


@dataclass(frozen=True, kw_only=True)
class GainDrift:
    """Gain error against the gain at 25 C: at fixed bias, with the law, and through the firmware.

    The columns are at the temperatures asked for (the rows a command
    prints); the headline figures are over every ADC code of the operating
    range, each at both edges of its temperature interval (so they include
    the ADC quantisation), whatever rows were asked for.

    Attributes
    ----------
    fixed_bias_v : float
        The fixed bias: the one giving the law's overvoltage at 25 C, volt.
    temp_c, breakdown_v, adc_code, fixed_gain_error_pct, law_supply_v, series_drop_mv, law_gain_error_pct,
    firmware_dac_code, firmware_gain_error_pct, dark_rate_hz : ndarray
        Per temperature: the breakdown voltage, the ADC code the board
        reads, the gain error at the fixed bias (percent), the supply output
        the law asks for (volt), the drop across the series resistor (mV),
        the gain error the law leaves at the sensor (percent), the DAC code
        of the lookup table, the gain error through the integer path
        (percent) and the dark count rate under the law (hertz).
    codes_evaluated : int
        Number of ADC codes of the operating range the figures cover.
    fixed_gain_error_ptp_pct, law_gain_error_ptp_pct, firmware_gain_error_ptp_pct : float
        Peak-to-peak gain error over every ADC code of the range, percent.
    fixed_gain_error_max_abs_pct, law_gain_error_max_abs_pct, firmware_gain_error_max_abs_pct : float
        Largest absolute gain error over every ADC code of the range, percent.
    """

    fixed_bias_v: float
    temp_c: np.ndarray
    breakdown_v: np.ndarray
    adc_code: np.ndarray
    fixed_gain_error_pct: np.ndarray
    law_supply_v: np.ndarray
    series_drop_mv: np.ndarray
    law_gain_error_pct: np.ndarray
    firmware_dac_code: np.ndarray
    firmware_gain_error_pct: np.ndarray
    dark_rate_hz: np.ndarray
    codes_evaluated: int
    fixed_gain_error_ptp_pct: float
    fixed_gain_error_max_abs_pct: float
    law_gain_error_ptp_pct: float
    law_gain_error_max_abs_pct: float
    firmware_gain_error_ptp_pct: float
    firmware_gain_error_max_abs_pct: float


@dataclass(frozen=True, kw_only=True)
class BudgetTerm:
    """One term of a gain-error budget, as built and after calibration (percent gain error, its limit).

    Attributes
    ----------
    key, name : str
        The term's identifier and its name in words.
    limit_pct, calibrated_limit_pct : float
        Its limit as built and after a one-point calibration, largest over the range.
    """

    key: str
    name: str
    limit_pct: float
    calibrated_limit_pct: float


@dataclass(frozen=True, kw_only=True)
class BudgetSummary:
    """The headline figures of a gain-error budget (percent gain error over the operating range).

    Attributes
    ----------
    rss_pct, calibrated_rss_pct : float
        Root-sum-square (1 sigma) as built and after a one-point calibration.
    worst_case_pct, calibrated_worst_case_pct : float
        Worst case (limits plus systematic), as built and after calibration.
    dominant, calibrated_dominant : str
        Key of the largest term, as built and after calibration.
    dominant_name, calibrated_dominant_name : str
        The same terms in words.
    monte_carlo_std_pct : float or None
        Standard deviation (1 sigma) of the seeded Monte Carlo.
    electronics_terms : tuple of BudgetTerm
        The terms of the electronics' drifts, static converter errors and
        sensor lag, largest after calibration first.
    """

    rss_pct: float
    worst_case_pct: float
    calibrated_rss_pct: float
    calibrated_worst_case_pct: float
    dominant: str
    calibrated_dominant: str
    dominant_name: str
    calibrated_dominant_name: str
    monte_carlo_std_pct: float | None
    electronics_terms: tuple[BudgetTerm, ...] = ()


@dataclass(frozen=True, kw_only=True)
class TableSummary:
    """The instrument's lookup table, verified at every ADC code of the range.

    Attributes
    ----------
    bound_pct : float
        Gain-error bound the table was sized for, percent.
    optimised_entries, optimised_table_bytes : int
        Size of the optimised table.
    uniform_entries, uniform_table_bytes : int
        Size of the smallest uniform table meeting the bound (the baseline).
    codes_verified : int
        ADC codes checked.
    max_gain_error_pct : float
        Largest absolute gain error of the table against the law over every
        ADC code of the range, percent.
    files : tuple of str
        Files written (filled by the edge that writes them).
    """

    bound_pct: float
    optimised_entries: int
    optimised_table_bytes: int
    uniform_entries: int
    uniform_table_bytes: int
    codes_verified: int
    max_gain_error_pct: float
    files: tuple[str, ...] = ()


@dataclass(frozen=True, kw_only=True)
class LightError:
    """Largest absolute gain error over the range at one light level, for two drop corrections.

    Attributes
    ----------
    photon_rate_hz : float
        Photon rate on the sensor.
    modelled_max_gain_error_pct : float
        With the drop corrected from the modelled dark current, percent.
    measured_max_gain_error_pct : float
        With the drop corrected from the measured current, percent.
    """

    photon_rate_hz: float
    modelled_max_gain_error_pct: float
    measured_max_gain_error_pct: float


@dataclass(frozen=True, kw_only=True)
class LoopSummary:
    """A loop tuned (robust PI) and verified at its firmware rate, or a bias set open-loop.

    Attributes
    ----------
    loop : str
        ``"cooler"`` or ``"bias supply"``.
    profile : str
        Name of the profile the plant comes from.
    open_loop : bool
        True for a board without a bias read-back channel: no loop is
        tuned and the numeric fields are nan.
    rate_hz : float
        Firmware loop rate.
    kp, ki_per_s : float
        Parallel-form gains, in the plant's actuator and measured units.
    kp_unit, ki_unit : str
        Their units (e.g. ``A/K`` and ``A/(K s)``, or ``DAC code/V``).
    stable : bool
        Whether the sampled loop is stable (at every ambient checked).
    gain_margin, phase_margin_deg : float
        Margins at the nominal operating point (gain margin as a ratio).
    ms : float
        Maximum sensitivity: the largest over the ambient range for the cooler.
    settling_time_s, overshoot_pct : float
        Of the closed-loop setpoint step.
    ambient_check : tuple of AmbientCheck
        The cooler linearised at each ambient of the range (empty otherwise).
    findings : tuple of Finding
        Operating point, verification and ambient-range findings.
    """

    loop: str
    profile: str
    open_loop: bool = False
    rate_hz: float = float("nan")
    kp: float = float("nan")
    ki_per_s: float = float("nan")
    kp_unit: str = ""
    ki_unit: str = ""
    stable: bool = True
    gain_margin: float = float("nan")
    phase_margin_deg: float = float("nan")
    ms: float = float("nan")
    settling_time_s: float = float("nan")
    overshoot_pct: float = float("nan")
    ambient_check: tuple = ()
    findings: tuple = ()


@dataclass(frozen=True, kw_only=True)
class InstrumentReport:
    """One instrument: a SiPM type on a board at an overvoltage, under the constant-gain law.

    Attributes
    ----------
    sipm, board : str
        Profile names.
    overvoltage_v : float
        Target overvoltage, volt.
    law : str
        The compensation law.
    drift : GainDrift
        Gain error at fixed bias, with the law and through the firmware.
    budget : BudgetSummary
        What the hardware adds.
    table : TableSummary
        The lookup table and its verification.
    light : tuple of LightError or None
        Gain error under light for the two drop corrections (``None`` when
        the board has no current-sense channel).
    findings : tuple of Finding
        What the user should know (e.g. the board cannot reach the law).
    lookup_table : LookupTable
        The table itself (not printed).
    compensation_law : CompensationLaw
        The law itself (not printed).
    """

    sipm: str
    board: str
    overvoltage_v: float
    law: str
    drift: GainDrift
    budget: BudgetSummary
    table: TableSummary
    light: tuple[LightError, ...] | None
    findings: tuple[Finding, ...] = ()
    lookup_table: object = field(default=None, repr=False, compare=False, metadata={"json": False})
    compensation_law: object = field(default=None, repr=False, compare=False, metadata={"json": False})


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


def _gain_errors_pct(law, sipm_profile, board_profile, temps_c):
    """Gain error (percent, against 25 C) at fixed bias and with the law, per temperature."""
    from compensator.physics.sipm import evaluate, gain
    from compensator.physics.supply import sipm_bias_v

    device, supply = sipm_profile.device, board_profile.supply
    fixed_bias_v = float(device.breakdown.breakdown_v(NOMINAL_TEMP_C)) + law.overvoltage_v
    nominal = float(gain(device, fixed_bias_v, NOMINAL_TEMP_C))
    fixed = evaluate(device, temps_c, bias_v=fixed_bias_v)
    supply_v = law.output_v(temps_c)
    at_sensor_v = sipm_bias_v(supply, device, supply_v, temps_c)
    return dict(
        fixed_bias_v=fixed_bias_v,
        fixed=100.0 * (fixed.gain / nominal - 1.0),
        supply_v=supply_v,
        at_sensor_v=at_sensor_v,
        law=100.0 * (gain(device, at_sensor_v, temps_c) / nominal - 1.0),
    )


def gain_drift(law, sipm_profile, board_profile, table, *, temps_c) -> GainDrift:
    """Gain error at fixed bias, with the law and through the firmware's integer path.

    The fixed bias is the one giving the law's overvoltage at 25 C. The
    law's supply output has the series-resistor drop added back as the law
    says. The firmware path is the whole chain
    (:func:`compensator.firmware.integer_path.integer_path_gain_error`):
    temperature -> ADC code -> lookup table -> DAC code -> supply output ->
    bias at the sensor after the filter resistor. Gains are evaluated at the
    bias that really reaches the sensor.

    Parameters
    ----------
    law : CompensationLaw
        The law the table holds.
    sipm_profile : SipmProfile
        The sensor.
    board_profile : BoardProfile
        The board: temperature channel, supply.
    table : LookupTable
        The firmware's table.
    temps_c : array_like
        Temperatures of the columns, degree Celsius (the figures do not
        depend on them).

    Returns
    -------
    GainDrift
    """
    from compensator.firmware.integer_path import integer_path_gain_error, integer_path_points
    from compensator.physics.sipm import evaluate

    device = sipm_profile.device
    temps_c = np.asarray(temps_c, dtype=float)
    adc_code = board_profile.temperature.adc_code(temps_c)
    rows = _gain_errors_pct(law, sipm_profile, board_profile, temps_c)
    firmware_rows = integer_path_points(table, law, board_profile, temps_c, adc_code, reference_temp_c=NOMINAL_TEMP_C)
    # Every ADC code of the range, at both edges of its interval: there the firmware path's extremes sit (the DAC
    # code stays put within a code), and the same temperatures span the range for the fixed bias and the law.
    path = integer_path_gain_error(table, law, board_profile, within_code="edges", reference_temp_c=NOMINAL_TEMP_C)
    every = _gain_errors_pct(law, sipm_profile, board_profile, path.temp_c)

    def ptp(x):
        return float(np.ptp(x))

    def max_abs(x):
        return float(np.max(np.abs(x)))

    return GainDrift(
        fixed_bias_v=rows["fixed_bias_v"], temp_c=temps_c, breakdown_v=device.breakdown.breakdown_v(temps_c),
        adc_code=adc_code, fixed_gain_error_pct=rows["fixed"], law_supply_v=rows["supply_v"],
        series_drop_mv=1e3 * (rows["supply_v"] - rows["at_sensor_v"]), law_gain_error_pct=rows["law"],
        firmware_dac_code=firmware_rows.dac_code, firmware_gain_error_pct=firmware_rows.gain_error_pct,
        dark_rate_hz=evaluate(device, temps_c, bias_v=rows["at_sensor_v"]).dark_rate_hz,
        codes_evaluated=path.codes_evaluated,
        fixed_gain_error_ptp_pct=ptp(every["fixed"]), fixed_gain_error_max_abs_pct=max_abs(every["fixed"]),
        law_gain_error_ptp_pct=ptp(every["law"]), law_gain_error_max_abs_pct=max_abs(every["law"]),
        firmware_gain_error_ptp_pct=path.peak_to_peak_gain_error_pct,
        firmware_gain_error_max_abs_pct=path.max_abs_gain_error_pct)


def _budget_summary(law, board_profile, *, samples: int) -> BudgetSummary:
    from compensator.law import electronics_terms, gain_error_budget

    budget = gain_error_budget(law, board_profile, samples=samples)
    names = {t.key: t.name for t in budget.terms}
    electronics = sorted(electronics_terms(budget), key=lambda t: -t.calibrated_limit_pct)
    return BudgetSummary(
        rss_pct=budget.rss_pct, worst_case_pct=budget.worst_case_pct, calibrated_rss_pct=budget.calibrated_rss_pct,
        calibrated_worst_case_pct=budget.calibrated_worst_case_pct, dominant=budget.dominant,
        calibrated_dominant=budget.calibrated_dominant, dominant_name=names.get(budget.dominant, budget.dominant),
        calibrated_dominant_name=names.get(budget.calibrated_dominant, budget.calibrated_dominant),
        monte_carlo_std_pct=budget.monte_carlo.std_pct if budget.monte_carlo else None,
        electronics_terms=tuple(BudgetTerm(key=t.key, name=t.name, limit_pct=t.limit_pct,
                                           calibrated_limit_pct=t.calibrated_limit_pct) for t in electronics))


def _light_errors(sipm_profile, board_profile, *, overvoltage_v, temps_c, photon_rates_hz):
    from compensator.law import build_law, gain_error_at_light_pct

    if board_profile.current_sense is None:
        return None
    laws = {mode: build_law(sipm_profile, board_profile, overvoltage_v, kind="constant_gain", drop_correction=mode)
            for mode in ("modelled", "measured")}
    largest = {mode: [float(np.max(np.abs(gain_error_at_light_pct(law, board_profile, rate, temps_c))))
                      for rate in photon_rates_hz] for mode, law in laws.items()}
    return tuple(LightError(photon_rate_hz=float(rate), modelled_max_gain_error_pct=m, measured_max_gain_error_pct=x)
                 for rate, m, x in zip(photon_rates_hz, largest["modelled"], largest["measured"]))


def evaluate_instrument(sipm_profile, board_profile, *, overvoltage_v: float, temps_c,
                        bound_pct: float = DEFAULT_TABLE_BOUND_PCT, budget_samples: int = BUDGET_SAMPLES,
                        photon_rates_hz=DEFAULT_PHOTON_RATES_HZ) -> InstrumentReport:
    """Build the constant-gain law, size and verify its table, and tell what each stage leaves.

    Parameters
    ----------
    sipm_profile : SipmProfile
        The sensor.
    board_profile : BoardProfile
        The controller board.
    overvoltage_v : float
        Target overvoltage, volt.
    temps_c : array_like
        Temperatures of the printed rows, degree Celsius (the headline
        figures are over every ADC code of the range regardless).
    bound_pct : float, optional
        Gain-error bound of the table, percent.
    budget_samples : int, optional
        Monte Carlo samples of the budget.
    photon_rates_hz : sequence of float, optional
        Light levels at which the two drop corrections are compared.

    Returns
    -------
    InstrumentReport
    """
    from compensator.errors import ModelError
    from compensator.findings import Severity
    from compensator.firmware.tables import build_table, sweep_table
    from compensator.law import build_law, check_law_in_range

    law = build_law(sipm_profile, board_profile, overvoltage_v, kind="constant_gain")
    findings = []
    try:
        check_law_in_range(law)
    except ModelError as exc:
        findings.append(Finding(code="law_out_of_reach", severity=Severity.WARNING, message=exc.reason))
    table = build_table(law, board_profile, bound_pct, layout="optimised")
    uniform = build_table(law, board_profile, bound_pct, layout="uniform")
    sweep = sweep_table(table, law, board_profile)
    summary = TableSummary(
        bound_pct=bound_pct, optimised_entries=table.entries, optimised_table_bytes=table.table_bytes,
        uniform_entries=uniform.entries, uniform_table_bytes=uniform.table_bytes,
        codes_verified=int(sweep.adc_code.size), max_gain_error_pct=sweep.max_gain_error_pct)
    temps_c = np.asarray(temps_c, dtype=float)
    return InstrumentReport(
        sipm=sipm_profile.name, board=board_profile.name, overvoltage_v=float(overvoltage_v), law=law.kind,
        drift=gain_drift(law, sipm_profile, board_profile, table, temps_c=temps_c),
        budget=_budget_summary(law, board_profile, samples=budget_samples), table=summary,
        light=_light_errors(sipm_profile, board_profile, overvoltage_v=overvoltage_v, temps_c=temps_c,
                            photon_rates_hz=photon_rates_hz),
        findings=tuple(findings), lookup_table=table, compensation_law=law)


def render_table_files(report: InstrumentReport, sipm_profile, board_profile) -> dict[str, str]:
    """The instrument's table as C99 source and its sweep as CSV: file name -> text.

    Parameters
    ----------
    report : InstrumentReport
        From :func:`evaluate_instrument`.
    sipm_profile : SipmProfile
        The sensor (named in the files' banner).
    board_profile : BoardProfile
        The board (named in the banner; its channel gives the sweep).
    """
    from compensator.firmware.table_c import render_sweep_csv, render_table_c
    from compensator.firmware.tables import sweep_table

    table, law = report.lookup_table, report.compensation_law
    rendered = render_table_c(table, [sipm_profile, board_profile])
    return {**rendered, "sweep.csv": render_sweep_csv(sweep_table(table, law, board_profile))}


def tune_loops(cooler_profile, board_profile, *, ms_max: float = LOOP_MS,
               ambient_range_c: tuple[float, float] = (-25.0, 45.0)) -> tuple[LoopSummary, ...]:
    """Tune (robust PI, Ms bound) and verify the cooler loop over the field's ambient range, and the bias loop.

    The cooler's gains must hold the Ms bound at every ambient of the range,
    each checked with its dew point and hot side. The bias loop is tuned only
    when the board reads its bias back; otherwise its bias is set open-loop
    and the summary says so.

    Parameters
    ----------
    cooler_profile : ThermalProfile
        The cooler.
    board_profile : BoardProfile
        The board whose bias supply, filter and read-back form the second loop.
    ms_max : float, optional
        Bound on the maximum sensitivity.
    ambient_range_c : tuple of float, optional
        Lowest and highest ambient of the field, degree Celsius.

    Returns
    -------
    tuple of LoopSummary
    """
    from compensator.loops import design

    designs = [("cooler", cooler_profile.name,
                design.design_cooler_loop(cooler_profile.cooler, method="robust", ms_max=ms_max,
                                          ambient_range_c=ambient_range_c))]
    if board_profile.bias_readback is not None:
        designs.append(("bias supply", board_profile.name,
                        design.design_bias_loop(board_profile, method="robust", ms_max=ms_max)))
    out = []
    for loop, source, res in designs:
        report = res.report
        out.append(LoopSummary(
            loop=loop, profile=source, rate_hz=1.0 / res.sample_time_s, kp=res.gains.kp, ki_per_s=res.gains.ki_per_s,
            kp_unit=res.units.kp_unit, ki_unit=res.units.ki_unit, stable=bool(res.ok),
            gain_margin=report.margins.gain_margin, phase_margin_deg=report.margins.phase_margin_deg,
            ms=report.margins.ms if res.ambient is None else res.ambient.worst_ms,
            settling_time_s=report.step.settling_time_s, overshoot_pct=report.step.overshoot_pct,
            ambient_check=() if res.ambient is None else tuple(res.ambient.checks), findings=tuple(res.findings)))
    if board_profile.bias_readback is None:
        out.append(LoopSummary(loop="bias supply", profile=board_profile.name, open_loop=True,
                               findings=(Finding(code="bias_open_loop", severity="info", message=design.NO_READBACK),)))
    return tuple(out)


def sipm_operating_findings(device, state) -> tuple[Finding, ...]:
    """What a user should know about SiPM operating points: limits passed, gain lost below breakdown.

    Parameters
    ----------
    device : Sipm
        The sensor model (its limits).
    state : SipmState
        The operating points (from :func:`compensator.physics.sipm.evaluate`).

    Returns
    -------
    tuple of Finding
    """
    from compensator.findings import Severity

    found = []
    if np.any(state.overvoltage_v > device.max_overvoltage_v):
        found.append(Finding(code="overvoltage_above_limit", severity=Severity.DANGER,
                             message=f"overvoltage above the profile's max_overvoltage_v {device.max_overvoltage_v:g} V "
                                     f"(largest {float(np.max(state.overvoltage_v)):.3f} V)"))
    if np.any(state.current_a > device.max_current_a):
        found.append(Finding(code="current_above_limit", severity=Severity.DANGER,
                             message=f"current above the profile's max_current_a {device.max_current_a:g} A "
                                     f"(largest {float(np.max(state.current_a)):.3g} A)"))
    if np.any(state.overvoltage_v <= 0):
        found.append(Finding(code="below_breakdown", severity=Severity.WARNING,
                             message="bias at or below breakdown at some temperatures: gain is zero there"))
    return tuple(found)


def describe_temperature_channel(channel) -> str:
    """The board's temperature channel in words (sensor, standard or model, ADC), for people.

    Parameters
    ----------
    channel : TemperatureChannel
        The board's channel.
    """
    from compensator.physics.sensors import RtdSensor

    sensor, fe = channel.sensor, channel.front_end
    if isinstance(sensor, RtdSensor):
        what = (f"platinum RTD, R0 {sensor.r0_ohm:g} ohm, Callendar-Van Dusen (IEC 60751), "
                f"class {sensor.tolerance_class}")
    else:
        model = "Steinhart-Hart" if sensor.steinhart_hart is not None else f"Beta {sensor.beta_k:g} K"
        what = f"NTC thermistor, {sensor.r25_ohm:g} ohm at 25 C, {model}"
    reference = "ratiometric" if fe.ratiometric else "absolute reference"
    return f"{what}; {fe.adc_bits}-bit ADC ({reference})"
