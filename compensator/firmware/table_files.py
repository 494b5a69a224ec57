"""Everything the ``table`` command produces, computed and rendered before anything is written.

:func:`prepare_table_files` builds the table (one layout, or every layout and
the smallest), checks it at every ADC code of the range, checks the
sensor-fault state, and renders the C99 files and ``sweep.csv`` as text. The
caller (the command line) writes the whole file set at once, or nothing.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from compensator.errors import ModelError
from compensator.firmware.table_c import (
    DEFAULT_FUNCTION_NAME,
    SWEEP_MODES,
    check_function_name,
    check_prefix,
    default_sweep_mode,
    render_sweep_csv,
    render_table_c,
)
from compensator.firmware.tables import (
    DEFAULT_FAULT_MARGIN_K,
    LookupTable,
    TableSweep,
    adc_quantisation_gain_pct,
    build_table,
    compare_layouts,
    sweep_table,
)

__all__ = ["SWEEP_FILE", "TableFiles", "prepare_table_files"]

#: Name of the per-code check written beside the C files.
SWEEP_FILE = "sweep.csv"


@dataclass(frozen=True, eq=False, kw_only=True)
class TableFiles:
    """A table, its checks and its rendered files.

    Attributes
    ----------
    table : LookupTable
        The table the files hold.
    candidates : tuple of LayoutCandidate
        Every layout tried (only the chosen one for a fixed layout).
    uniform_table : LookupTable
        The smallest uniform table, the baseline.
    sweep : TableSweep
        The table checked at every ADC code of the range.
    sweep_mode : {"none", "summary", "full"}
        What ``sweep.csv`` holds (``none``: no file).
    adc_quantisation_gain_error_pct : float
        Largest gain error of half an ADC code of temperature over the range, percent.
    findings : tuple of Finding
        Safe-state findings and the layout report's findings.
    files : dict of str to str
        File name -> text, in writing order.
    """

    table: LookupTable
    candidates: tuple
    uniform_table: LookupTable
    sweep: TableSweep
    sweep_mode: str
    adc_quantisation_gain_error_pct: float
    findings: tuple
    files: dict


def prepare_table_files(law, board, *, profiles, max_gain_error_pct: float, layout: str = "smallest",
                        fault_margin_k: float = DEFAULT_FAULT_MARGIN_K, name: str = DEFAULT_FUNCTION_NAME,
                        prefix: str = "", sweep: str | None = None, settings: dict | None = None) -> TableFiles:
    """Build, check and render a lookup table and its sweep; write nothing.

    Parameters
    ----------
    law : CompensationLaw
        The law to tabulate.
    board : BoardProfile
        The board it runs on.
    profiles : sequence of profile objects
        Named with their hashes in the banner.
    max_gain_error_pct : float
        Bound on the gain error at every ADC code of the range, percent.
    layout : {"smallest", "uniform", "segmented", "optimised", "polynomial"}
        As for :func:`~compensator.firmware.tables.build_table`.
    fault_margin_k : float
        Readings further than this outside the range are sensor faults, kelvin.
    name : str
        C function name.
    prefix : str
        Namespace prefix of every C symbol.
    sweep : {"none", "summary", "full"}, optional
        What ``sweep.csv`` holds; default ``full`` up to 16 ADC bits, ``summary`` above.
        Every code is checked whatever is written.
    settings : dict, optional
        Options written into the banner.

    Returns
    -------
    TableFiles

    Raises
    ------
    TableError
        The bound cannot be met.
    ModelError
        A bad name, prefix or sweep mode.
    """
    check_function_name(name)
    check_prefix(prefix)
    if sweep is not None and sweep not in SWEEP_MODES:
        raise ModelError(f"sweep must be one of {', '.join(SWEEP_MODES)}, got {sweep!r}", key="sweep")
    if layout == "smallest":
        report = compare_layouts(law, board, max_gain_error_pct, fault_margin_k=fault_margin_k)
        table, candidates, findings = report.table, report.candidates, report.findings
        uniform = report.tables.get("uniform")
    else:
        table = build_table(law, board, max_gain_error_pct, layout, fault_margin_k=fault_margin_k)
        uniform = table if layout == "uniform" else None
        candidates, findings = (), ()
    if uniform is None:
        uniform = build_table(law, board, max_gain_error_pct, "uniform", fault_margin_k=fault_margin_k)
    checked = sweep_table(table, law, board)
    if not checked.within_bound:  # every layout is checked at every code when built; this would be a bug
        raise RuntimeError(f"table misses its bound at ADC code {checked.worst_adc_code}")
    mode = sweep or default_sweep_mode(table.adc_bits)
    files = render_table_c(table, profiles, name, settings, prefix=prefix)
    if mode != "none":
        files[SWEEP_FILE] = render_sweep_csv(checked, mode=mode)
    adc_q = float(np.max(adc_quantisation_gain_pct(law, board.temperature, checked.temp_c)))
    safe = table.safe_state.findings if table.safe_state is not None else ()
    return TableFiles(table=table, candidates=tuple(candidates), uniform_table=uniform, sweep=checked,
                      sweep_mode=mode, adc_quantisation_gain_error_pct=adc_q, findings=tuple(safe) + tuple(findings),
                      files=files)
