"""Figures and a self-contained HTML report of a field simulation (the package's file-writing edge).

Figures (matplotlib, Agg backend): the temperatures against time (outdoor
air, enclosure, die, sensor, the cooled plate), the bias at the SiPM and the
gain deviation of every strategy against time, and the histogram of the
units' largest gain deviations (the yield). The HTML report embeds the same
figures as data URIs and holds the tables, so it is one file that opens
anywhere. Files are written all or nothing, never over existing ones.
"""

from __future__ import annotations

import base64
import html
import io
from pathlib import Path

import numpy as np

from compensator.fileio import write_files_atomic

__all__ = ["render_figures", "write_plots", "render_html", "write_report", "FIGURES"]

#: File names of the figures.
FIGURES = ("sim-temperatures.png", "sim-bias.png", "sim-gain.png", "sim-yield.png")

_COLOURS = {"uncompensated": "tab:red", "compensated": "tab:blue", "compensated_cooled": "tab:green",
            "gain_trimmed": "tab:purple"}


def _png(fig) -> bytes:
    from compensator.plotting import plt

    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100)
    plt.close(fig)
    return buf.getvalue()


def render_figures(report) -> dict:
    """The report's figures as PNG bytes.

    Parameters
    ----------
    report : SimulationReport

    Returns
    -------
    dict
        File name -> PNG bytes (the yield histogram only with a Monte Carlo).
    """
    from compensator.plotting import plt

    tr = report.traces
    days = tr.time_s / 86400.0
    out = {}
    fig, ax = plt.subplots(figsize=(9, 4))
    ax.plot(days, tr.outdoor_temp_c, lw=0.8, color="0.6", label="outdoor air")
    ax.plot(days, tr.enclosure_temp_c, lw=1.0, color="tab:orange", label="enclosure air")
    ax.plot(days, tr.die_temp_c, lw=1.0, color="tab:red", label="die (uncooled)")
    ax.plot(days, tr.sensor_temp_c, lw=0.8, ls="--", color="k", label="sensor (uncooled)")
    if "compensated_cooled" in tr.strategies:
        ax.plot(days, tr.strategies["compensated_cooled"]["die_temp_c"], lw=1.0, color="tab:green",
                label="die on the cooled plate")
    ax.set_xlabel("time, days")
    ax.set_ylabel("temperature, degree C")
    ax.set_title(f"{report.scenario}: temperatures")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=8, loc="best")
    out[FIGURES[0]] = _png(fig)
    fig, ax = plt.subplots(figsize=(9, 4))
    for name, d in tr.strategies.items():
        ax.plot(days, d["bias_v"], lw=0.9, color=_COLOURS.get(name), label=name)
    ax.set_xlabel("time, days")
    ax.set_ylabel("bias at the SiPM, V")
    ax.set_title(f"{report.scenario}: bias")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=8)
    out[FIGURES[1]] = _png(fig)
    fig, axes = plt.subplots(2, 1, figsize=(9, 6), sharex=True)
    for name, d in tr.strategies.items():
        axes[0].plot(days, d["gain_dev_pct"], lw=0.8, color=_COLOURS.get(name), label=name)
        if name != "uncompensated":
            axes[1].plot(days, d["gain_dev_pct"], lw=0.8, color=_COLOURS.get(name), label=name)
    for ax in axes:
        ax.axhspan(-report.band_pct, report.band_pct, color="0.9", zorder=0)
        ax.grid(alpha=0.3)
        ax.set_ylabel("gain deviation, %")
    axes[0].set_title(f"{report.scenario}: gain deviation from the target (band +-{report.band_pct:g} %)")
    axes[1].set_title("without the uncompensated strategy", fontsize=9)
    axes[1].set_xlabel("time, days")
    axes[0].legend(fontsize=8)
    out[FIGURES[2]] = _png(fig)
    if report.yield_ is not None:
        y = report.yield_
        fig, ax = plt.subplots(figsize=(9, 4))
        top = max(float(np.max(s.gain_dev_max_abs_pct)) for s in y.strategies if s.name != "uncompensated") \
            if any(s.name != "uncompensated" for s in y.strategies) else 1.0
        bins = np.linspace(0.0, max(top, 2 * y.band_pct) * 1.05, 40)
        for s in y.strategies:
            if s.name == "uncompensated":
                continue
            ax.hist(np.clip(s.gain_dev_max_abs_pct, 0, bins[-1]), bins=bins, histtype="step", lw=1.5,
                    color=_COLOURS.get(s.name), label=f"{s.name}: {100 * s.fraction_within:.1f} % within")
        ax.axvline(y.band_pct, color="k", ls="--", lw=1)
        ax.set_xlabel("largest absolute gain deviation of a unit over the run, %")
        ax.set_ylabel("units")
        ax.set_title(f"{report.scenario}: yield over {y.units} units (band +-{y.band_pct:g} %)")
        ax.legend(fontsize=8)
        out[FIGURES[3]] = _png(fig)
    return out


def write_plots(report, directory) -> list[Path]:
    """Write the figures into ``directory`` (created if missing; existing files are refused).

    Parameters
    ----------
    report : SimulationReport
    directory : str or path-like

    Returns
    -------
    list of Path
    """
    return write_files_atomic(directory, render_figures(report), what="plot")


def _table(rows, headers) -> str:
    head = "".join(f"<th>{html.escape(h)}</th>" for h in headers)
    body = "".join("<tr>" + "".join(f"<td>{html.escape(str(c))}</td>" for c in r) + "</tr>" for r in rows)
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _fmt(value, spec):
    return "-" if value is None else format(value, spec)


def render_html(report, figures: dict | None = None) -> str:
    """The self-contained HTML report (figures embedded as data URIs).

    Parameters
    ----------
    report : SimulationReport
    figures : dict, optional
        From :func:`render_figures` (rendered here when not given).

    Returns
    -------
    str
    """
    figures = render_figures(report) if figures is None else figures
    esc = html.escape
    runs = _table([(r.name, f"{r.gain_dev_max_abs_pct:.3f}", f"{r.gain_dev_pk_pk_pct:.3f}",
                    f"{r.gain_dev_rms_pct:.3f}", f"{r.time_outside_band_pct:.2f}",
                    f"{1e3 * r.overvoltage_dev_max_abs_v:.2f}", r.sensor_fault_ticks, r.out_of_range_ticks,
                    f"{r.cooler_mean_power_w:.3f}", _fmt(r.trim_converged_s, ".0f"),
                    _fmt(r.trim_residual_rms_pct, ".3f"))
                   for r in report.runs],
                  ["strategy", "gain dev. largest |.| %", "gain dev. peak-to-peak %", "gain dev. RMS %",
                   f"time outside +-{report.band_pct:g} % (%)", "overvoltage dev. largest |.| mV",
                   "sensor-fault ticks", "out-of-range ticks", "cooler mean power W", "trim converged s",
                   "trim residual RMS %"])
    parts = [
        "<!DOCTYPE html><html><head><meta charset='utf-8'>",
        f"<title>compensator field simulation: {esc(report.scenario)}</title>",
        "<style>body{font-family:sans-serif;max-width:1000px;margin:2em auto;color:#222}"
        "table{border-collapse:collapse;margin:1em 0;font-size:90%}td,th{border:1px solid #bbb;padding:3px 8px;"
        "text-align:right}th{background:#eee}img{max-width:100%}.note{color:#555;font-size:90%}</style>",
        "</head><body>",
        f"<h1>Field simulation: {esc(report.scenario)}</h1>",
        f"<p>Scenario file <code>{esc(str(report.source))}</code> (sha256 {esc(report.sha256[:16])}...), "
        f"{report.duration_days:g} days at one tick every {report.tick_s:g} s ({report.ticks} ticks); firmware "
        f"run by the {esc(report.firmware)}; lookup table of {report.table_entries} entries ({report.table_bytes} "
        f"bytes) sized for {report.table_bound_pct:g} %. Metrics over every tick after the first "
        f"{report.settle_s:g} s.</p>",
        "<h2>The calibrated unit, strategy by strategy, on the same weather</h2>", runs,
    ]
    if report.uncompensated_over_compensated is not None:
        parts.append(f"<p>The uncompensated gain wanders {report.uncompensated_over_compensated:.0f} times further "
                     "than the compensated one (ratio of the largest absolute deviations).</p>")
    if report.trim_vs_published_factor is not None:
        parts.append(f"<p>The digital gain trim holds the gain {report.trim_vs_published_factor:.0f} times tighter "
                     "than the about 2 % published for analog feedback on the mean dark-pulse amplitude over "
                     "20 to 30 C (Licciulli, Indiveri and Marzocca, IEEE Trans. Nucl. Sci. 60, 2013), here over "
                     "the whole week's temperature range.</p>")
    for name, title in zip(FIGURES[:3], ("Temperatures", "Bias at the SiPM", "Gain deviation")):
        if name in figures:
            data = base64.b64encode(figures[name]).decode("ascii")
            parts.append(f"<h3>{title}</h3><img alt='{esc(title)}' src='data:image/png;base64,{data}'>")
    if report.yield_ is not None:
        y = report.yield_
        parts.append(f"<h2>Monte Carlo yield over {y.units} units</h2>")
        parts.append(f"<p>Tolerances drawn: {esc(', '.join(y.groups))}; seed {y.seed}; {y.chunks} chunks on "
                     f"{esc(y.executor)}. A unit is within when its largest absolute gain deviation over the run "
                     f"stays within +-{y.band_pct:g} %.</p>")
        parts.append(_table([(s.name, f"{100 * s.fraction_within:.1f}", f"{s.gain_dev_max_abs_median_pct:.3f}",
                              f"{s.gain_dev_max_abs_p95_pct:.3f}") for s in y.strategies],
                            ["strategy", "units within (%)", "median of largest |dev| %",
                             "95th percentile of largest |dev| %"]))
        if FIGURES[3] in figures:
            data = base64.b64encode(figures[FIGURES[3]]).decode("ascii")
            parts.append(f"<img alt='yield' src='data:image/png;base64,{data}'>")
        parts.append(f"<h3>Worst units ({esc(y.strategy)})</h3>")
        parts.append(_table([(w.unit, f"{w.gain_dev_max_abs_pct:.3f}", f"{w.gain_dev_pk_pk_pct:.3f}",
                              "; ".join(f"{k} {v:.4g}" for k, v in w.draws.items())) for w in y.worst],
                            ["unit", "largest |dev| %", "peak-to-peak %", "drawn deviations"]))
    parts.append("<p class='note'>A model for planning, not a design approval. SiPM bias supplies deliver tens of "
                 "volts (above 60 V dc is hazardous live under IEC 61010-1); a cooler with an unsinked hot side runs "
                 "away, and a cold plate below the dew point wets the electronics. Building and installing follows "
                 "local codes and licensed practice.</p>")
    parts.append("</body></html>")
    return "\n".join(parts) + "\n"


def write_report(report, directory, figures: dict | None = None) -> list[Path]:
    """Write ``report.html`` into ``directory`` (created if missing; an existing file is refused).

    Parameters
    ----------
    report : SimulationReport
    directory : str or path-like
    figures : dict, optional
        From :func:`render_figures`.

    Returns
    -------
    list of Path
    """
    return write_files_atomic(directory, {"report.html": render_html(report, figures)}, what="report")
