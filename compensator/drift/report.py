"""The drift report at the edge: PNG figures and one self-contained HTML page.

The only module of :mod:`compensator.drift` that touches files. The figures
are rendered in memory and embedded in the page (base64), and also written
beside it; the set is written all or nothing. No timestamps in the output:
the same logbook gives the same page.
"""

from __future__ import annotations

import base64
import html
import io
import math
from datetime import datetime, timezone

import numpy as np

from compensator.drift.analysis import DriftReport, bin_series
from compensator.drift.fleet import FleetSummary
from compensator.fileio import write_files_atomic
from compensator.provenance import banner_lines

__all__ = ["render_report", "write_report", "figure_names"]

_QUANTITY_LABELS = {"gain_pct": "gain (%)", "bias_v": "bias (V)", "temp_k": "temperature (K)"}


def _utc(t: float) -> str:
    return datetime.fromtimestamp(t, tz=timezone.utc).strftime("%Y-%m-%d %H:%M:%S UTC")


def _png(fig) -> bytes:
    from compensator.plotting import plt

    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100, metadata={"Software": None})
    plt.close(fig)
    return buf.getvalue()


def _days(t, t0):
    return (np.asarray(t) - t0) / 86400.0


def figure_names(unit_id: str) -> list[str]:
    """File names of one unit's figures, in the order they appear.

    Parameters
    ----------
    unit_id : str
    """
    safe = "".join(c if c.isalnum() or c in "-_." else "_" for c in unit_id) or "unit"
    return [f"{safe}-gain.png", f"{safe}-tempco.png", f"{safe}-allan.png", f"{safe}-faults.png"]


def _figures(run, report: DriftReport, breakdown_v=None) -> list[bytes]:
    from compensator.plotting import plt

    t0 = report.start_unix_s
    binned = bin_series(run, bin_s=report.bin_s, breakdown_v=breakdown_v)
    day = _days(binned.time_unix_s, t0)
    figs = []

    fig, ax = plt.subplots(figsize=(8, 3.6))
    ax.plot(day, binned.gain_pct, ".", ms=3, color="C0", label=f"gain, {report.bin_s:g} s bin means")
    if math.isfinite(report.drift_pct_per_day):
        mid = day.mean()
        ax.plot(day, binned.gain_pct.mean() + report.drift_pct_per_day * (day - mid), "-", color="C3",
                label=f"drift {report.drift_pct_per_day:+.4f} %/day")
    ax.set_xlabel("time since start (days)")
    ax.set_ylabel("gain relative to median (%)")
    twin = ax.twinx()
    twin.plot(day, binned.temp_c, "-", lw=0.7, color="C1", alpha=0.6)
    twin.set_ylabel("temperature (C)", color="C1")
    ax.legend(loc="upper left", fontsize=8)
    ax.set_title(f"{report.unit_id}: gain ({report.gain_source}) and temperature", fontsize=10)
    fig.subplots_adjust(left=0.1, right=0.9, bottom=0.14, top=0.9)
    figs.append(_png(fig))

    fig, ax = plt.subplots(figsize=(6, 3.6))
    detrended = binned.gain_pct
    if math.isfinite(report.drift_pct_per_day):
        detrended = binned.gain_pct - report.drift_pct_per_day * (day - day.mean())
    ax.plot(binned.temp_c, detrended, ".", ms=3)
    if math.isfinite(report.residual_tempco_pct_per_k) and binned.temp_c.size:
        tt = np.linspace(binned.temp_c.min(), binned.temp_c.max(), 2)
        ax.plot(tt, detrended.mean() + report.residual_tempco_pct_per_k * (tt - binned.temp_c.mean()), "-",
                color="C3", label=f"{report.residual_tempco_pct_per_k:+.4f} %/K")
        ax.legend(fontsize=8)
    ax.set_xlabel("temperature (C)")
    ax.set_ylabel("gain less drift (%)")
    ax.set_title("residual temperature coefficient")
    fig.subplots_adjust(left=0.14, right=0.96, bottom=0.14, top=0.9)
    figs.append(_png(fig))

    fig, axes = plt.subplots(1, max(1, len(report.allan)), figsize=(9, 3.2), squeeze=False)
    for ax, curve in zip(axes[0], report.allan):
        ax.loglog(curve.tau_s, curve.deviation_in_quantity_unit, "o-", ms=3)
        ax.plot([curve.minimum_tau_s], [curve.minimum_deviation_in_quantity_unit], "s", color="C3")
        ax.set_xlabel("averaging time (s)")
        ax.set_title(_QUANTITY_LABELS.get(curve.quantity, curve.quantity), fontsize=9)
        ax.grid(True, which="both", alpha=0.3)
    fig.suptitle("overlapping Allan deviation (IEEE Std 1139), in each quantity's unit")
    fig.subplots_adjust(left=0.09, right=0.98, bottom=0.16, top=0.82, wspace=0.4)
    figs.append(_png(fig))

    fig, ax = plt.subplots(figsize=(8, 2.2 + 0.25 * len(report.fault_summary)))
    names = [s.fault for s in report.fault_summary]
    for interval in report.fault_intervals:
        y = names.index(interval.fault)
        start = _days(interval.start_unix_s, t0)
        ax.barh(y, max(_days(interval.end_unix_s, t0) - start, 1e-4), left=start, color="C3")
    for gap in report.gaps:
        ax.axvspan(_days(gap.start_unix_s, t0), _days(gap.end_unix_s, t0), color="0.8", lw=0)
    ax.set_yticks(range(len(names)))
    ax.set_yticklabels(names)
    ax.set_xlim(0, max(report.duration_s / 86400.0, 1e-3))
    ax.set_xlabel("time since start (days); grey: no telemetry")
    ax.set_title("fault timeline" if names else "fault timeline: no faults")
    fig.subplots_adjust(left=0.2, right=0.97, bottom=0.3, top=0.85)
    figs.append(_png(fig))
    return figs


def _fmt(value, spec=".4g"):
    if isinstance(value, float) and not math.isfinite(value):
        return "n/a"
    return format(value, spec) if isinstance(value, (int, float)) else str(value)


def _table(headers, rows) -> str:
    head = "".join(f"<th>{html.escape(h)}</th>" for h in headers)
    body = "".join("<tr>" + "".join(f"<td>{html.escape(_fmt(c))}</td>" for c in row) + "</tr>" for row in rows)
    return f"<table><tr>{head}</tr>{body}</table>"


def _unit_section(report: DriftReport, pngs, names) -> str:
    ci = report.drift_ci_pct_per_day
    tci = report.residual_tempco_ci_pct_per_k
    level = f"{100 * report.confidence_fraction:g} %"
    rows = [
        ("samples (used in fits)", f"{report.samples} ({report.samples_used})"),
        ("sessions", report.sessions),
        ("from / to", f"{_utc(report.start_unix_s)} / {_utc(report.end_unix_s)}"),
        ("duration_s", report.duration_s),
        ("gain source", report.gain_source),
        (f"drift_pct_per_day ({level} interval)", f"{_fmt(report.drift_pct_per_day)} [{_fmt(ci[0])}, {_fmt(ci[1])}]"),
        (f"residual_tempco_pct_per_k ({level} interval)",
         f"{_fmt(report.residual_tempco_pct_per_k)} [{_fmt(tci[0])}, {_fmt(tci[1])}]"),
        ("time-temperature correlation / variance inflation",
         f"{_fmt(report.time_temp_correlation, '.3f')} / {_fmt(report.variance_inflation, '.2f')}"),
        ("temperature range (C)", f"{_fmt(report.temp_min_c, '.2f')} to {_fmt(report.temp_max_c, '.2f')}"),
        ("gain peak-to-peak of bin means (%)", report.gain_peak_to_peak_pct),
        ("gaps (total s)", f"{len(report.gaps)} ({_fmt(report.gap_total_s, '.0f')})"),
    ]
    allan = [(c.quantity, c.minimum_tau_s, c.minimum_deviation_in_quantity_unit) for c in report.allan]
    faults = [(s.fault, s.intervals, s.total_s) for s in report.fault_summary]
    findings = "".join(f"<li><b>{html.escape(f.severity.value)}</b>: {html.escape(f.message)}</li>"
                       for f in report.findings) or "<li>none</li>"
    images = "".join(f'<figure><img alt="{html.escape(n)}" src="data:image/png;base64,'
                     f'{base64.b64encode(p).decode("ascii")}"><figcaption>{html.escape(n)}</figcaption></figure>'
                     for p, n in zip(pngs, names))
    return (f"<h2>{html.escape(report.unit_id)} <small>{html.escape(report.logbook)}</small></h2>"
            + _table(["figure", "value"], rows)
            + "<h3>Allan deviation minimum</h3>" + _table(["quantity", "tau_s", "deviation"], allan)
            + "<h3>Faults</h3>" + (_table(["fault", "intervals", "total_s"], faults) if faults else "<p>none</p>")
            + f"<h3>Findings</h3><ul>{findings}</ul>" + images)


_STYLE = ("body{font-family:sans-serif;max-width:60em;margin:2em auto;color:#222}"
          "table{border-collapse:collapse;margin:0.5em 0}td,th{border:1px solid #bbb;padding:2px 8px;text-align:left}"
          "img{max-width:100%}figure{margin:1em 0}small{color:#666;font-weight:normal}pre{color:#666}")


def render_report(runs, summary: FleetSummary, *, breakdown_v=None) -> dict:
    """Render the report files: ``{file name: bytes}``, the HTML page last.

    Parameters
    ----------
    runs : sequence of RunSeries
        The runs, in the order of ``summary.unit_reports``.
    summary : FleetSummary
        Their analysis (one unit is a fleet of one).
    breakdown_v : sequence of array_like or None, optional
        Per run, the breakdown voltages the analysis used (``None`` for none).

    Returns
    -------
    dict
        File name -> content.
    """
    files = {}
    sections = []
    breakdown_v = breakdown_v or [None] * len(runs)
    for run, report, bd in zip(runs, summary.unit_reports, breakdown_v):
        names = figure_names(report.unit_id)
        names = [n if n not in files else f"{len(files)}-{n}" for n in names]
        pngs = _figures(run, report, bd)
        files.update(zip(names, pngs))
        sections.append(_unit_section(report, pngs, names))
    banner = "\n".join(banner_lines("drift report", [], {"logbooks": ", ".join(r.logbook for r in summary.unit_reports)}))
    fleet = ""
    if len(summary.unit_reports) > 1:
        rows = [(r.unit_id, r.samples, r.drift_pct_per_day, f"[{_fmt(r.drift_ci_pct_per_day[0])}, "
                 f"{_fmt(r.drift_ci_pct_per_day[1])}]", r.residual_tempco_pct_per_k, r.gain_source)
                for r in summary.unit_reports]
        spread = [(s.quantity, s.unit_count, s.mean_in_quantity_unit, s.std_in_quantity_unit, s.minimum_in_quantity_unit, s.maximum_in_quantity_unit, s.largest_abs_unit)
                  for s in summary.spread]
        fleet = ("<h2>Fleet</h2>" + _table(["unit", "samples", "drift_pct_per_day", "interval",
                                           "residual_tempco_pct_per_k", "gain source"], rows)
                 + _table(["quantity", "units", "mean", "std (1 sigma)", "min", "max", "largest |value|"], spread))
    page = (f"<!DOCTYPE html><html><head><meta charset=\"utf-8\"><title>drift report</title>"
            f"<style>{_STYLE}</style></head><body><h1>Drift report</h1><pre>{html.escape(banner)}</pre>"
            f"{fleet}{''.join(sections)}</body></html>\n")
    files["drift-report.html"] = page.encode("utf-8")
    return files


def write_report(directory, runs, summary: FleetSummary, *, breakdown_v=None, overwrite: bool = False) -> list:
    """Render and write the report into ``directory`` (all files or none).

    Parameters
    ----------
    directory : str or path-like
    runs : sequence of RunSeries
    summary : FleetSummary
    breakdown_v : sequence of array_like or None, optional
    overwrite : bool
        Replace existing files.

    Returns
    -------
    list of Path
        The files written, the HTML page last.
    """
    from pathlib import Path

    from compensator.errors import InputError, Problem

    if not overwrite:   # refuse before the (slow) rendering
        names = [n for r in summary.unit_reports for n in figure_names(r.unit_id)] + ["drift-report.html"]
        existing = [Path(directory) / n for n in names if (Path(directory) / n).exists()]
        if existing:
            raise InputError([Problem(str(p), 0, "", "already exists; not overwriting (use --force to replace it)")
                              for p in existing])
    files = render_report(runs, summary, breakdown_v=breakdown_v)
    return write_files_atomic(directory, files, overwrite=overwrite, what="drift report")
