"""Figures for ``tune --plot`` and ``identify --plot`` (matplotlib, Agg backend, PNG files).

Each function renders into memory and writes through
:func:`compensator.plotting.save_figure`, so a figure is never half
written and an existing file is never replaced unless asked.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from compensator.errors import InputError, Problem
from compensator.fileio import output_dir
from compensator.loops.plants import discrete_frequency_response
from compensator.loops.verify import controller_frequency_response, frequency_grid
from compensator.plotting import plt
from compensator.plotting import save_figure as _save

__all__ = ["plot_loop", "plot_step_fit", "plot_relay"]


def _check_dir(directory) -> Path:
    return output_dir(directory, "plot")


def plot_loop(directory, stem: str, plant, gains, report, *, overwrite: bool = False,
              computation_delay_samples: int = 1) -> list[Path]:
    """Bode diagram with margins, sensitivity magnitude, and the closed-loop step with the actuator.

    Parameters
    ----------
    directory : str or path-like
        Existing directory.
    stem : str
        File name prefix, e.g. ``"cooler-robust"``.
    plant : Plant
    gains : PidGains
    report : LoopReport
        From :func:`compensator.loops.verify.verify_loop`.
    overwrite : bool
        Replace existing files.
    computation_delay_samples : int
        Samples between reading the measurement and applying the output (1),
        as in :func:`compensator.loops.verify.verify_loop`.

    Returns
    -------
    list of Path
        ``<stem>-bode.png``, ``<stem>-sensitivity.png``, ``<stem>-step.png``.
    """
    d = _check_dir(directory)
    names = [d / f"{stem}-{kind}.png" for kind in ("bode", "sensitivity", "step")]
    if not overwrite:
        for p in names:
            if p.exists():
                raise InputError(Problem(str(p), 0, "", "already exists; not overwriting (use --force to replace it)"))
    T = report.sample_time_s
    w = frequency_grid(T, 3000, 5.0)
    loop = controller_frequency_response(gains, T, w) * discrete_frequency_response(
        plant, T, w, computation_delay_samples)
    m = report.margins
    written = []

    fig, (ax1, ax2) = plt.subplots(2, 1, figsize=(7, 6), sharex=True)
    ax1.loglog(w, np.abs(loop), color="C0")
    ax1.axhline(1.0, color="grey", lw=0.8)
    if np.isfinite(m.crossover_rad_s):
        ax1.axvline(m.crossover_rad_s, color="C2", ls="--", lw=0.8, label=f"crossover {m.crossover_rad_s:.3g} rad/s")
    if np.isfinite(m.phase_crossover_rad_s):
        ax1.axvline(m.phase_crossover_rad_s, color="C3", ls=":", lw=0.8,
                    label=f"gain margin {m.gain_margin:.2f}")
    ax1.set_ylabel("|L|")
    ax1.legend(loc="lower left", fontsize=8)
    ax1.set_title(f"loop gain, sampled every {T:g} s (ZOH, exact delay, 1 sample computation)")
    phase = np.degrees(np.unwrap(np.angle(loop)))
    ax2.semilogx(w, phase, color="C0")
    ax2.axhline(-180.0, color="grey", lw=0.8)
    ax2.set_ylabel("phase of L, degree")
    ax2.set_xlabel("angular frequency, rad/s")
    ax2.set_title(f"phase margin {m.phase_margin_deg:.1f} deg", fontsize=9)
    fig.tight_layout()
    written.append(_save(fig, names[0], overwrite))

    fig, ax = plt.subplots(figsize=(7, 4))
    ax.loglog(w, 1.0 / np.abs(1.0 + loop), color="C1", label="|S| = 1 / |1 + L|")
    ax.axhline(m.ms, color="C3", ls="--", lw=0.8, label=f"Ms = {m.ms:.3f}")
    ax.set_xlabel("angular frequency, rad/s")
    ax.set_ylabel("|S|")
    ax.legend(fontsize=8)
    ax.set_title("sensitivity")
    fig.tight_layout()
    written.append(_save(fig, names[1], overwrite))

    fig, (ax1, ax2) = plt.subplots(2, 1, figsize=(7, 6), sharex=True)
    s = report.step
    if np.isfinite(s.settling_time_s) and s.settling_time_s > 0:  # show the transient, not the long flat tail
        ax1.set_xlim(0.0, min(float(report.time_s[-1]), 3.0 * s.settling_time_s + 10 * T))
    ax1.step(report.time_s, report.output, where="post", color="C0")
    ax1.axhline(1.0, color="grey", lw=0.8)
    ax1.set_ylabel(f"output per unit step\n({plant.output_label})", fontsize=8)
    ax1.set_title(f"setpoint step: rise {s.rise_time_s:.3g} s, settling {s.settling_time_s:.3g} s, "
                  f"overshoot {s.overshoot_pct:.1f} %", fontsize=9)
    ax2.step(report.time_s, report.actuator, where="post", color="C1")
    ax2.set_ylabel(f"actuator per unit step\n({plant.input_label})", fontsize=8)
    ax2.set_xlabel("time, s")
    fig.tight_layout()
    written.append(_save(fig, names[2], overwrite))
    return written


def plot_step_fit(directory, stem: str, record, fitted_output, title: str, *, overwrite: bool = False) -> list[Path]:
    """Recorded step test with the fitted model's response, and the residuals.

    Parameters
    ----------
    directory : str or path-like
        Existing directory; writes ``<stem>-fit.png``.
    stem : str
    record : LoopRecord
    fitted_output : ndarray
        Model output at ``record.time_s``.
    title : str
    overwrite : bool

    Returns
    -------
    list of Path
    """
    d = _check_dir(directory)
    fig, (ax1, ax2, ax3) = plt.subplots(3, 1, figsize=(7, 7), sharex=True,
                                        gridspec_kw={"height_ratios": [1, 3, 1]})
    ax1.step(record.time_s, record.input, where="post", color="C2")
    ax1.set_ylabel("input")
    ax2.plot(record.time_s, record.output, ".", ms=2, color="C0", label="recorded")
    ax2.plot(record.time_s, fitted_output, color="C3", label="fitted model")
    ax2.set_ylabel("output")
    ax2.legend(fontsize=8)
    ax2.set_title(title, fontsize=9)
    ax3.plot(record.time_s, record.output - fitted_output, ".", ms=2, color="C1")
    ax3.set_ylabel("residual")
    ax3.set_xlabel("time, s")
    fig.tight_layout()
    return [_save(fig, d / f"{stem}-fit.png", overwrite)]


def plot_relay(directory, stem: str, record, result, *, overwrite: bool = False) -> list[Path]:
    """Relay experiment: relay output and the process limit cycle with its amplitude and period.

    Parameters
    ----------
    directory : str or path-like
        Existing directory; writes ``<stem>-relay.png``.
    stem : str
    record : LoopRecord
    result : RelayResult
    overwrite : bool

    Returns
    -------
    list of Path
    """
    d = _check_dir(directory)
    fig, (ax1, ax2) = plt.subplots(2, 1, figsize=(7, 6), sharex=True)
    ax1.step(record.time_s, record.input, where="post", color="C2")
    ax1.set_ylabel("relay output")
    ax2.plot(record.time_s, record.output, color="C0")
    ax2.set_ylabel("process output")
    ax2.set_xlabel("time, s")
    ax2.set_title(f"a = {result.oscillation_amplitude:.4g}, Pu = {result.ultimate_period_s:.4g} s, "
                  f"Ku = {result.ultimate_gain:.4g} ({result.cycles} cycles)", fontsize=9)
    fig.tight_layout()
    return [_save(fig, d / f"{stem}-relay.png", overwrite)]
