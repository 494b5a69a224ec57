"""The records of one instrument end to end, and the settings the demo evaluates it with.

Every headline figure is over every ADC code of the board's operating range
and says its statistic: ``*_ptp_pct`` is a peak-to-peak gain swing,
``*_max_abs_pct`` the largest absolute gain error, both against the gain at 25 C.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from compensator.findings import Finding

__all__ = [
    "NOMINAL_TEMP_C",
    "DEFAULT_TABLE_BOUND_PCT",
    "DEFAULT_PHOTON_RATES_HZ",
    "BUDGET_SAMPLES",
    "LOOP_MS",
    "Characterisation",
    "GainDrift",
    "BudgetTerm",
    "BudgetSummary",
    "TableSummary",
    "LightError",
    "LoopSummary",
    "InstrumentReport",
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
    layout : str
        The layout chosen: the smallest of every layout built and checked at
        every ADC code (:func:`compensator.firmware.tables.compare_layouts`).
    entries, table_bytes : int
        Size of the chosen table.
    uniform_entries, uniform_table_bytes : int
        Size of the smallest uniform table meeting the bound (the baseline;
        0 when no uniform table meets it).
    codes_verified : int
        ADC codes checked.
    max_gain_error_pct : float
        Largest absolute gain error of the table against the law over every
        ADC code of the range, percent.
    files : tuple of str
        Files written (filled by the edge that writes them).
    """

    bound_pct: float
    layout: str
    entries: int
    table_bytes: int
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
