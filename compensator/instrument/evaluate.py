"""One instrument evaluated: its law, table, gain drift over every ADC code, budget and light, as records.

Nothing here reads or writes files (:func:`render_table_files` returns the
text of the C files; the edge writes them).
"""

from __future__ import annotations

import numpy as np

from compensator.findings import Finding
from compensator.instrument.records import (
    BUDGET_SAMPLES,
    DEFAULT_PHOTON_RATES_HZ,
    DEFAULT_TABLE_BOUND_PCT,
    NOMINAL_TEMP_C,
    BudgetSummary,
    BudgetTerm,
    GainDrift,
    InstrumentReport,
    LightError,
    TableSummary,
)

__all__ = [
    "gain_drift",
    "evaluate_instrument",
    "render_table_files",
]


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
    from compensator.firmware.tables import compare_layouts, sweep_table
    from compensator.law import build_law, check_law_in_range

    law = build_law(sipm_profile, board_profile, overvoltage_v, kind="constant_gain")
    findings = []
    try:
        check_law_in_range(law)
    except ModelError as exc:
        findings.append(Finding(code="law_out_of_reach", severity=Severity.WARNING, message=exc.reason))
    layouts = compare_layouts(law, board_profile, bound_pct)
    table, uniform = layouts.table, layouts.tables.get("uniform")
    findings.extend(layouts.findings)
    sweep = sweep_table(table, law, board_profile)
    summary = TableSummary(
        bound_pct=bound_pct, layout=table.layout, entries=table.entries, table_bytes=table.table_bytes,
        uniform_entries=0 if uniform is None else uniform.entries, uniform_table_bytes=layouts.uniform_bytes,
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
