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

The package's modules: :mod:`~compensator.instrument.records` (the frozen
records and the demo's settings), :mod:`~compensator.instrument.characterise`
(breakdown and tempco from synthetic bench curves),
:mod:`~compensator.instrument.evaluate` (law, table, drift, budget, light),
:mod:`~compensator.instrument.loops` (cooler and bias loops) and
:mod:`~compensator.instrument.operating` (operating findings, the temperature
channel in words).
"""

from compensator.instrument.characterise import characterise_breakdown
from compensator.instrument.evaluate import evaluate_instrument, gain_drift, render_table_files
from compensator.instrument.loops import tune_loops
from compensator.instrument.operating import describe_temperature_channel, sipm_operating_findings
from compensator.instrument.records import (
    BUDGET_SAMPLES,
    DEFAULT_PHOTON_RATES_HZ,
    DEFAULT_TABLE_BOUND_PCT,
    LOOP_MS,
    NOMINAL_TEMP_C,
    BudgetSummary,
    BudgetTerm,
    Characterisation,
    GainDrift,
    InstrumentReport,
    LightError,
    LoopSummary,
    TableSummary,
)

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
