"""Calibration plots (PNG, matplotlib Agg), written atomically into a directory.

Plots are derived output: a plot of the same name from an earlier run is replaced.
"""

from __future__ import annotations

from pathlib import Path, PurePath

import numpy as np

from compensator.fileio import output_dir
from compensator.plotting import plt, save_figure

__all__ = ["plot_dir", "plot_iv", "plot_spectrum", "plot_tempco", "unique_names"]


def plot_dir(path) -> Path:
    """Create (if needed) and return the plot directory."""
    return output_dir(path, "plot")


def unique_names(files, suffix):
    """Plot file names from input file stems, made unique (``stem-2`` ...) when stems repeat."""
    seen, names = {}, []
    for f in files:
        stem = PurePath(f).stem or "data"
        seen[stem] = seen.get(stem, 0) + 1
        names.append(f"{stem}{suffix}" if seen[stem] == 1 else f"{stem}-{seen[stem]}{suffix}")
    return names


def _save(fig, path) -> Path:
    return save_figure(fig, path, overwrite=True)  # plots are derived output: replaced on a rerun


def plot_iv(record, path) -> Path:
    """I-V curve (log current), d ln I/dV and its inverse, with the breakdown marked.

    The bottom panel shows (d ln I/dV)^-1 with the fitted line (V - Vbd)/k for
    the inverse-log-derivative method.

    Parameters
    ----------
    record : IvRecord
        With arrays kept (``keep_arrays=True``).
    path : path-like
        PNG file to write.
    """
    fig, (ax1, ax2, ax3) = plt.subplots(3, 1, sharex=True, figsize=(7, 8))
    ax1.semilogy(record.bias_v, record.current_a, ".", ms=3, label="measured")
    ax1.set_ylabel("current (A)")
    title = PurePath(record.file).name + (f" at {record.temp_c:.1f} C" if record.temp_c is not None else "")
    ax1.set_title(title)
    deriv = record.log_derivative_per_v
    ax2.plot(record.grid_v, deriv, "-", lw=1.2, label="d ln I/dV (smoothed)")
    ax2.set_ylabel("d ln I/dV (1/V)")
    with np.errstate(divide="ignore", invalid="ignore"):
        inverse = np.where(deriv > 0, 1.0 / deriv, np.nan)
    ax3.plot(record.grid_v, inverse, ".", ms=3, label="(d ln I/dV)^-1")
    ax3.set_ylabel("(d ln I/dV)^-1 (V)")
    ax3.set_xlabel("bias (V)")
    if record.ok:
        vbd, err = record.breakdown_v, record.breakdown_err_v
        for ax in (ax1, ax2, ax3):
            ax.axvline(vbd, color="C3", lw=1)
            ax.axvspan(vbd - err, vbd + err, color="C3", alpha=0.2)
        if np.isfinite(record.fit_lo_v):
            ax2.axvspan(record.fit_lo_v, record.fit_hi_v, color="C2", alpha=0.15, label="fit range")
        if np.isfinite(record.exponent):
            line_v = np.linspace(vbd, record.fit_hi_v + 0.5 * (record.fit_hi_v - vbd), 50)
            ax3.plot(line_v, (line_v - vbd) / record.exponent, color="C3", lw=1.2,
                     label=f"line fit: k = {record.exponent:.2f}")
            top = 2.0 * (record.fit_hi_v - vbd) / record.exponent
            ax3.set_ylim(0, top if np.isfinite(top) and top > 0 else None)
        ax1.plot([], [], color="C3", label=f"breakdown {vbd:.3f} +- {err:.3f} V ({record.method})")
    else:
        ax1.text(0.02, 0.9, record.reason, transform=ax1.transAxes, fontsize=8, color="C3")
    ax1.legend(fontsize=8, loc="lower right")
    ax2.legend(fontsize=8, loc="upper right")
    ax3.legend(fontsize=8, loc="upper left")
    fig.tight_layout()
    return _save(fig, path)


def plot_spectrum(fit, path, title="", charge_unit="") -> Path:
    """Charge spectrum with the fitted model and normalised residuals.

    Parameters
    ----------
    fit : SpectrumFit
        Uses its ``charge``, ``counts`` and ``model_counts`` fields.
    path : path-like
    title : str
    charge_unit : str
    """
    x, c, m = np.asarray(fit.charge), np.asarray(fit.counts), np.asarray(fit.model_counts)
    fig, (ax1, ax2) = plt.subplots(2, 1, sharex=True, figsize=(7, 6), gridspec_kw={"height_ratios": [3, 1]})
    ax1.step(x, c, where="mid", lw=0.8, label="data")
    ax1.plot(x, m, "-", lw=1.2, color="C3",
             label=f"fit: gain {fit.gain:.4g} +- {fit.gain_err:.2g}, mean p.e. {fit.mean_pe:.3g}, crosstalk lambda {fit.crosstalk_branching_ratio:.3g} (p {fit.crosstalk_probability:.3g})")
    ax1.set_yscale("symlog", linthresh=1.0)
    ax1.set_ylabel("counts per bin")
    ax1.set_title(title)
    ax1.legend(fontsize=8)
    with np.errstate(divide="ignore", invalid="ignore"):
        resid = np.where(m > 0, (c - m) / np.sqrt(np.maximum(m, 1.0)), 0.0)
    ax2.plot(x, resid, ".", ms=2)
    ax2.axhline(0, color="k", lw=0.5)
    ax2.set_ylabel("(data - fit)/sqrt(fit)")
    ax2.set_xlabel(f"charge ({charge_unit})" if charge_unit else "charge")
    fig.tight_layout()
    return _save(fig, path)


def plot_tempco(temp_c, breakdown_v, breakdown_err_v, fit, path, title="") -> Path:
    """Breakdown voltage against temperature with the fitted model and its one-sigma band.

    Parameters
    ----------
    temp_c, breakdown_v : array_like
        Degree Celsius, volt.
    breakdown_err_v : array_like or None
        One-sigma error bars, volt.
    fit : TempcoFit
    path : path-like
    title : str
    """
    temp_c = np.asarray(temp_c, dtype=float)
    breakdown_v = np.asarray(breakdown_v, dtype=float)
    grid = np.linspace(temp_c.min() - 2, temp_c.max() + 2, 200)
    chosen = fit.chosen
    fig, (ax1, ax2) = plt.subplots(2, 1, sharex=True, figsize=(7, 6), gridspec_kw={"height_ratios": [3, 1]})
    ax1.errorbar(temp_c, breakdown_v, yerr=breakdown_err_v, fmt="o", ms=4, label="breakdown")
    ax1.plot(grid, chosen(grid), color="C3",
             label=f"{fit.model}: {fit.tempco_mv_per_k:.2f} +- {fit.tempco_err_mv_per_k:.2f} mV/K")
    band = chosen.band(grid)
    if np.all(np.isfinite(band)):
        ax1.fill_between(grid, chosen(grid) - band, chosen(grid) + band, color="C3", alpha=0.25, label="1 sigma band")
    ax1.set_ylabel("breakdown (V)")
    ax1.set_title(title)
    ax1.legend(fontsize=8)
    ax2.errorbar(temp_c, 1e3 * (breakdown_v - chosen(temp_c)),
                 yerr=None if breakdown_err_v is None else 1e3 * np.asarray(breakdown_err_v), fmt="o", ms=3)
    ax2.axhline(0, color="k", lw=0.5)
    ax2.set_ylabel("residual (mV)")
    ax2.set_xlabel("temperature (C)")
    fig.tight_layout()
    return _save(fig, path)
