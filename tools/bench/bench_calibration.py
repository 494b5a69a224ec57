"""Benchmark: accuracy and throughput of the calibration methods beside naive baselines.

Usage: python tools/bench/bench_calibration.py [--curves N] [--spectra M] [--jobs J] [--files F] [--quick]

I-V curves: N seeded synthetic curves (50 mV grid, 221 points) cycling through
three noise levels (0.1, 0.5, 2 % relative) and three shapes (pure power law,
and two triggering-probability factors that bend it), breakdown 24-25 V. Each
method of ``find_breakdown`` runs vectorised over all N curves; the baseline is
the raw maximum of d ln I/dV (first differences, no smoothing). Accuracy is
the error against the known truth: median (bias), robust spread
(1.4826 x MAD) and 90th percentile of |error|. Target: 10,000 curves <= 10 s.

With ``--files F`` the first F curves are also written as CSV files and run
through the batch reader (``analyse_iv_files``), to show the cost of file I/O.

Spectra: M seeded synthetic charge histograms (random gain, crosstalk, mean
photoelectrons) fitted with ``fit_spectrum`` (J worker processes) beside the
baseline ``naive_gain`` (spacing of the two largest peaks). Target: 1,000
spectra <= 20 s.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np

from compensator.calibration.batch import analyse_iv_files, default_jobs
from compensator.calibration.iv import METHODS, find_breakdown
from compensator.calibration.spectrum import fit_spectrum, naive_gain, simulate_spectrum
from compensator.calibration.synthetic import simulate_iv
from compensator.errors import CompensatorError

GRID_V = np.round(np.arange(20.0, 31.0001, 0.05), 4)
NOISES = (0.001, 0.005, 0.02)
SHAPES = (None, 0.8, 2.0)


def make_curves(n, seed):
    """N curves cycling through noise levels and shapes; returns currents, truth and category labels."""
    rng = np.random.default_rng(seed)
    truth = rng.uniform(24.0, 25.0, n)
    currents = np.empty((n, GRID_V.size))
    labels = np.empty(n, dtype=object)
    combos = [(nz, sh) for nz in NOISES for sh in SHAPES]
    for j, (noise, shape) in enumerate(combos):
        idx = np.arange(j, n, len(combos))
        currents[idx] = simulate_iv(rng, GRID_V, truth[idx], geiger_scale_v=shape, relative_noise=noise)
        labels[idx] = f"noise {100 * noise:g}% {'power law' if shape is None else f'geiger {shape:g} V'}"
    return currents, truth, labels


def naive_breakdown(bias_v, currents):
    """Baseline: bias at the raw maximum of d ln I/dV (first differences, no smoothing)."""
    d = np.diff(np.log(currents), axis=1) / np.diff(bias_v)
    mid = 0.5 * (bias_v[1:] + bias_v[:-1])
    return mid[np.argmax(d, axis=1)]


def stats_mv(err_v):
    err = 1e3 * err_v[np.isfinite(err_v)]
    if err.size == 0:
        return float("nan"), float("nan"), float("nan")
    med = float(np.median(err))
    return med, float(1.4826 * np.median(np.abs(err - med))), float(np.percentile(np.abs(err), 90))


def bench_iv(n, seed, files):
    currents, truth, labels = make_curves(n, seed)
    rows = []
    per_label = {}
    for method in METHODS:
        start = time.perf_counter()
        r = find_breakdown(GRID_V, currents, method)
        secs = time.perf_counter() - start
        err = r.breakdown_v - truth
        rows.append((method, secs, n / secs, 1 - r.ok.mean(), *stats_mv(err),
                     float(np.nanmedian(r.breakdown_err_v)) * 1e3))
        per_label[method] = {lab: stats_mv(err[labels == lab])[0] for lab in dict.fromkeys(labels)}
    start = time.perf_counter()
    naive = naive_breakdown(GRID_V, currents)
    secs = time.perf_counter() - start
    rows.append(("naive raw max d ln I/dV (base)", secs, n / secs, 0.0, *stats_mv(naive - truth), float("nan")))
    per_label["naive (base)"] = {lab: stats_mv((naive - truth)[labels == lab])[0] for lab in dict.fromkeys(labels)}

    print(f"I-V curves: {n:,} on a {GRID_V.size}-point grid (50 mV), mixed noise and shapes")
    print(f"{'method':<34}{'seconds':>9}{'curves/s':>11}{'failed':>8}{'bias mV':>9}{'spread mV':>10}"
          f"{'p90|err| mV':>12}{'median sigma mV':>16}")
    for name, secs, rate, failed, med, spread, p90, sig in rows:
        print(f"{name:<34}{secs:>9.3f}{rate:>11.0f}{100 * failed:>7.1f}%{med:>9.1f}{spread:>10.1f}{p90:>12.1f}"
              f"{sig:>16.1f}")
    default_secs = rows[0][1] * 10_000 / n
    print(f"target 10,000 curves <= 10 s (default method): {default_secs:.2f} s scaled -> "
          f"{'met' if default_secs <= 10 else 'NOT met'}")
    print("\nmedian error (bias) in mV by curve category:")
    names = list(per_label)
    print(f"{'category':<28}" + "".join(f"{m[:22]:>24}" for m in names))
    for lab in dict.fromkeys(labels):
        print(f"{lab:<28}" + "".join(f"{per_label[m][lab]:>24.1f}" for m in names))

    if files:
        f = min(files, n)
        with tempfile.TemporaryDirectory() as tmp:
            paths = []
            for i in range(f):
                p = Path(tmp) / f"c{i:05d}.csv"
                lines = ["bias_v,current_a"] + [f"{b:.4f},{c:.6e}" for b, c in zip(GRID_V, currents[i])]
                p.write_text("\n".join(lines) + "\n")
                paths.append(str(p))
            for jobs in sorted({1, default_jobs()}):
                start = time.perf_counter()
                recs = analyse_iv_files(paths, jobs=jobs)
                secs = time.perf_counter() - start
                ok = sum(r.ok for r in recs)
                print(f"\nbatch from CSV files: {f:,} files, jobs={jobs}: {secs:.2f} s ({f / secs:.0f} files/s), "
                      f"{ok} analysed")


def _one_spectrum(args):
    seed, gain, xt, mu = args
    rng = np.random.default_rng(seed)
    charge, counts = simulate_spectrum(rng, gain=gain, pedestal=0.05, sigma0=0.04, sigma1=0.015, mean_pe=mu,
                                       crosstalk=xt, n_events=30000, bin_width=0.01)
    return charge, counts


def _fit_one(spec):
    charge, counts = spec
    try:
        return fit_spectrum(charge, counts).gain
    except CompensatorError:
        return float("nan")


def bench_spectra(m, seed, jobs):
    rng = np.random.default_rng(seed + 1)
    gains = rng.uniform(0.25, 0.7, m)
    params = [(seed * 100003 + i, g, rng.uniform(0.02, 0.2), rng.uniform(1.0, 3.5)) for i, g in enumerate(gains)]
    with ProcessPoolExecutor(max_workers=jobs) as pool:
        spectra = list(pool.map(_one_spectrum, params, chunksize=16))
    start = time.perf_counter()
    with ProcessPoolExecutor(max_workers=jobs) as pool:
        fitted = np.array(list(pool.map(_fit_one, spectra, chunksize=max(1, m // (8 * jobs)))))
    fit_secs = time.perf_counter() - start
    start = time.perf_counter()
    naive = np.array([naive_gain(c, n) for c, n in spectra])
    naive_secs = time.perf_counter() - start

    def rel(est):
        e = 100 * (est / gains - 1)
        e = e[np.isfinite(e)]
        med = float(np.median(e))
        return med, float(1.4826 * np.median(np.abs(e - med))), float(np.percentile(np.abs(e), 90))

    print(f"\ncharge spectra: {m:,} histograms (30,000 events each), gain 0.25-0.7 (charge units)")
    print(f"{'method':<34}{'seconds':>9}{'spectra/s':>11}{'failed':>8}{'bias %':>9}{'spread %':>10}{'p90|err| %':>12}")
    for name, secs, est in ((f"fit_spectrum (jobs={jobs})", fit_secs, fitted),
                            ("naive two-peak spacing (base)", naive_secs, naive)):
        med, spread, p90 = rel(est)
        failed = 100 * np.mean(~np.isfinite(est))
        print(f"{name:<34}{secs:>9.3f}{m / secs:>11.1f}{failed:>7.1f}%{med:>9.3f}{spread:>10.3f}{p90:>12.3f}")
    scaled = fit_secs * 1000 / m
    print(f"target 1,000 spectra <= 20 s: {scaled:.1f} s scaled -> {'met' if scaled <= 20 else 'NOT met'}")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--curves", type=int, default=10_000, help="I-V curves (default 10,000)")
    parser.add_argument("--spectra", type=int, default=1_000, help="spectra (default 1,000; 0 skips)")
    parser.add_argument("--files", type=int, default=0, help="also run F curves through CSV files and the batch reader")
    parser.add_argument("--jobs", type=int, default=0, help="worker processes for spectra (default: one per CPU)")
    parser.add_argument("--seed", type=int, default=2026)
    parser.add_argument("--quick", action="store_true", help="small sizes: 900 curves, 40 spectra, 200 files")
    args = parser.parse_args(argv)
    if args.quick:
        args.curves, args.spectra, args.files = 900, 40, 200
    jobs = args.jobs or default_jobs()
    bench_iv(args.curves, args.seed, args.files)
    if args.spectra:
        bench_spectra(args.spectra, args.seed, jobs)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
