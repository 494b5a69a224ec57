"""Benchmark: accuracy and throughput of the calibration methods beside naive baselines.

Usage: python tools/bench/bench_calibration.py [--curves N] [--spectra M] [--jobs J] [--files F] [--quick]

I-V curves: N seeded synthetic curves (50 mV grid, 221 points), breakdown 24-25
V, cycling through 33 categories: three noise levels (0.1, 0.5, 2 % relative)
times three shapes (pure power law, and two triggering-probability factors that
bend it), and leakage categories: leakage equal to the avalanche current at
0.05, 0.1, 0.2 and 0.3 V above breakdown, growing by 0.5 per volt, times
power-law exponents 1.5, 2 and 3, times noise 0.2 and 1 %. Each method of
``find_breakdown`` runs vectorised over all N curves in one process; the
baselines are the default method without its joint fit (the derivative method
alone) and the raw maximum of d ln I/dV (first differences, no smoothing).
Beside each category, the Cramer-Rao bound of the breakdown over the joint
fit's window (see ``cramer_rao_mv``). Throughput is given per CPU second of
one process (not inflated by other load on the machine) and per wall second
on a process pool of one worker per CPU.
Accuracy is the error against the known truth: median (bias), robust spread
(1.4826 x MAD), median and 90th percentile of |error|, and the fraction of
curves whose error lies within the reported one-sigma uncertainty. Targets for
the default method: median |error| <= 5 mV and p90 <= 15 mV on every category,
>= 5,000 curves/s.

One long curve: a 1,000,000-point sweep written to CSV and analysed by
``analyse_iv_files`` in a fresh process (time and peak resident memory),
beside numpy's loadtxt and the raw maximum. Target: <= 10 s and <= 1 GB.

With ``--files F`` the first F curves are also written as CSV files and run
through the batch reader (``analyse_iv_files``), to show the cost of file I/O.

Spectra: M seeded synthetic charge histograms (random gain, crosstalk, mean
photoelectrons) fitted with ``fit_spectrum`` (J worker processes) beside the
baseline ``naive_gain`` (spacing of the two largest peaks). Target: 1,000
spectra <= 20 s.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np

from compensator.calibration.batch import analyse_iv_files, default_jobs
from compensator.calibration.iv import DEFAULT_METHOD, METHODS, find_breakdown
from compensator.calibration.spectrum import fit_spectrum, simulate_spectrum
from compensator.calibration.synthetic import leakage_at_crossing_a, simulate_iv
from compensator.errors import CompensatorError

sys.path.insert(0, str(Path(__file__).resolve().parent))
from spectrum_baseline import naive_gain  # noqa: E402

GRID_V = np.round(np.arange(20.0, 31.0001, 0.05), 4)
NOISES = (0.001, 0.005, 0.02)
SHAPES = (None, 0.8, 2.0)
#: Leakage categories: leakage equal to the avalanche current this far above breakdown (V),
#: power-law exponents, relative noise; the leakage grows by LEAKAGE_SLOPE_PER_V.
CROSSINGS_V = (0.05, 0.1, 0.2, 0.3)
EXPONENTS = (1.5, 2.0, 3.0)
LEAKAGE_NOISES = (0.002, 0.01)
LEAKAGE_SLOPE_PER_V = 0.5
#: Targets for the default method on every category, and its throughput.
TARGET_MEDIAN_MV, TARGET_P90_MV, TARGET_CURVES_PER_S = 5.0, 15.0, 5000.0


def categories():
    """(label, keyword arguments of simulate_iv) for every curve category."""
    out = [(f"noise {100 * nz:g}% {'power law' if sh is None else f'geiger {sh:g} V'}",
            dict(geiger_scale_v=sh, relative_noise=nz)) for nz in NOISES for sh in SHAPES]
    for d in CROSSINGS_V:
        for k in EXPONENTS:
            for nz in LEAKAGE_NOISES:
                leak = leakage_at_crossing_a(d, exponent=k, leakage_slope_per_v=LEAKAGE_SLOPE_PER_V)
                out.append((f"leak={d:g}V k={k:g} noise {100 * nz:g}%",
                            dict(exponent=k, leakage_a=leak, leakage_slope_per_v=LEAKAGE_SLOPE_PER_V,
                                 relative_noise=nz)))
    return out


def make_curves(n, seed):
    """N curves cycling through the categories; returns currents, truth and category labels."""
    rng = np.random.default_rng(seed)
    truth = rng.uniform(24.0, 25.0, n)
    currents = np.empty((n, GRID_V.size))
    labels = np.empty(n, dtype=object)
    cats = categories()
    for j, (label, kwargs) in enumerate(cats):
        idx = np.arange(j, n, len(cats))
        currents[idx] = simulate_iv(rng, GRID_V, truth[idx], **kwargs)
        labels[idx] = label
    return currents, truth, labels


def naive_breakdown(bias_v, currents):
    """Baseline: bias at the raw maximum of d ln I/dV (first differences, no smoothing)."""
    d = np.diff(np.log(currents), axis=-1) / np.diff(bias_v)
    mid = 0.5 * (bias_v[1:] + bias_v[:-1])
    return mid[np.argmax(d, axis=-1)]


def stats_mv(err_v):
    """Median error, robust spread (1.4826 MAD), median |error| and 90th percentile of |error|, mV."""
    err = 1e3 * err_v[np.isfinite(err_v)]
    if err.size == 0:
        return float("nan"), float("nan"), float("nan"), float("nan")
    med = float(np.median(err))
    return (med, float(1.4826 * np.median(np.abs(err - med))), float(np.median(np.abs(err))),
            float(np.percentile(np.abs(err), 90)))


def cramer_rao_mv(kwargs, breakdown_v=24.5):
    """Cramer-Rao bound (1 sigma, mV) of the breakdown for a category, over the joint fit's window.

    The Fisher information of the generating model itself (synthetic.iv_current_a, with every
    parameter free: breakdown, ln A, k, leakage ln I and slope, and ln x_g where the category
    has a triggering-probability factor) for Gaussian noise of the category's relative size plus
    the absolute floor, over the bias points from JOINT_BELOW_V below to JOINT_SPAN_V above
    breakdown. No unbiased estimator that uses only these points, and not even one that knows
    the model form, can do better (Cramer-Rao inequality, common practice).
    """
    from compensator.calibration.ivjoint import JOINT_BELOW_V, JOINT_SPAN_V
    from compensator.calibration.synthetic import iv_current_a

    grid = GRID_V[(GRID_V >= breakdown_v - JOINT_BELOW_V) & (GRID_V <= breakdown_v + JOINT_SPAN_V)]
    geiger = kwargs.get("geiger_scale_v")
    theta = np.array([breakdown_v, np.log(1e-6), kwargs.get("exponent", 2.0), np.log(kwargs.get("leakage_a", 2e-10)),
                      kwargs.get("leakage_slope_per_v", 0.05)] + ([np.log(geiger)] if geiger else []))

    def model(t):
        return iv_current_a(grid, t[0], exponent=t[2], avalanche_a=np.exp(t[1]), leakage_a=np.exp(t[3]),
                            leakage_slope_per_v=t[4], geiger_scale_v=np.exp(t[5]) if geiger else None)

    current = model(theta)
    variance = (kwargs["relative_noise"] * current) ** 2 + 2e-12 ** 2
    columns = []
    for i in range(theta.size):
        h = 1e-6 * max(1.0, abs(theta[i]))
        up, down = theta.copy(), theta.copy()
        up[i] += h
        down[i] -= h
        columns.append((model(up) - model(down)) / (2 * h))
    jac = np.array(columns).T
    fisher = jac.T @ (jac / variance[:, None])
    return 1e3 * float(np.sqrt(np.linalg.inv(fisher)[0, 0]))


def _timed(function, *args, **kwargs):
    """Result, wall seconds and CPU seconds of this process (the CPU time is not inflated by other load)."""
    wall, cpu = time.perf_counter(), time.process_time()
    out = function(*args, **kwargs)
    return out, time.perf_counter() - wall, time.process_time() - cpu


def _pool_chunk(currents):
    cpu = time.process_time()
    find_breakdown(GRID_V, currents)
    return time.process_time() - cpu


def bench_iv(n, seed, files):
    currents, truth, labels = make_curves(n, seed)
    # The joint fit's compiled loop (numba) is compiled, or loaded from its cache, on the first call: once per
    # process, reported apart from the throughput.
    _, first_s, _ = _timed(find_breakdown, GRID_V, currents[:4])
    rows = []
    per_label = {}
    variants = [(m, m, {}) for m in METHODS]
    variants.insert(1, ("derivative only (base)", DEFAULT_METHOD, {"joint_fit": False}))
    for name, method, options in variants:
        r, secs, cpu = _timed(find_breakdown, GRID_V, currents, method, **options)
        err = r.breakdown_v - truth
        within = float(np.nanmean(np.abs(err) <= r.breakdown_err_v))
        rows.append((name, secs, n / cpu, 1 - r.ok.mean(), *stats_mv(err), within))
        per_label[name] = {lab: (stats_mv(err[labels == lab]), float(np.mean(~r.ok[labels == lab])),
                                 float(np.nanmean(r.leakage_limited[labels == lab])))
                           for lab in dict.fromkeys(labels)}
    naive, secs, cpu = _timed(naive_breakdown, GRID_V, currents)
    rows.append(("naive raw max d ln I/dV (base)", secs, n / cpu, 0.0, *stats_mv(naive - truth), float("nan")))
    per_label["naive (base)"] = {lab: (stats_mv((naive - truth)[labels == lab]), 0.0, 0.0)
                                 for lab in dict.fromkeys(labels)}
    jobs = default_jobs()
    chunks = np.array_split(currents, 8 * jobs)
    with ProcessPoolExecutor(max_workers=jobs) as pool:
        list(pool.map(_pool_chunk, chunks[:jobs]))  # start the workers before timing
        start = time.perf_counter()
        worker_cpu = sum(pool.map(_pool_chunk, chunks))
        pool_rate = n / (time.perf_counter() - start)
    pool_capacity = n / (worker_cpu / jobs)  # the pool's rate with its CPUs to itself

    print(f"I-V curves: {n:,} on a {GRID_V.size}-point grid (50 mV), {len(categories())} categories; first call "
          f"in this process (compiling the joint fit's loop, or loading it from numba's cache): {first_s:.2f} s")
    print(f"{'method':<34}{'wall s':>8}{'curves/CPU s':>13}{'failed':>8}{'bias mV':>9}{'spread mV':>10}"
          f"{'med|err| mV':>12}{'p90|err| mV':>12}{'within 1 sigma':>16}")
    for name, secs, rate, failed, med, spread, mabs, p90, within in rows:
        print(f"{name:<34}{secs:>8.2f}{rate:>13.0f}{100 * failed:>7.1f}%{med:>9.1f}{spread:>10.1f}{mabs:>12.1f}"
              f"{p90:>12.1f}{100 * within:>15.0f}%")
    rate = rows[0][2]
    print(f"throughput of {DEFAULT_METHOD} (with the joint fit): {rate:,.0f} curves per CPU second in one process "
          f"(CPU time, which the load of other processes does not inflate); on a pool of {jobs} processes "
          f"{pool_rate:,.0f} curves per wall second with this machine's load now, {pool_capacity:,.0f} per second "
          f"from the workers' CPU time (the pool with its CPUs to itself). Target >= {TARGET_CURVES_PER_S:,.0f}/s: "
          f"one process {'met' if rate >= TARGET_CURVES_PER_S else 'NOT met'}, pool "
          f"{'met' if pool_capacity >= TARGET_CURVES_PER_S else 'NOT met'}")
    print(f"\nmedian |error| / 90th percentile |error| in mV by category (target for {DEFAULT_METHOD}: "
          f"median <= {TARGET_MEDIAN_MV:g}, p90 <= {TARGET_P90_MV:g}); 'bound': the Cramer-Rao bound of the "
          f"breakdown over the joint fit's window as median / p90 of |error| (0.674 and 1.645 sigma):")
    names = list(per_label)
    cats = dict(categories())
    print(f"{'category':<32}" + "".join(f"{m[:24]:>26}" for m in names) + f"{'bound':>16}{'target':>8}{'limited':>9}")
    met = 0
    for lab in dict.fromkeys(labels):
        cells = []
        for m in names:
            (bias, _, mabs, p90), failed, _ = per_label[m][lab]
            cells.append(f"{mabs:>8.1f} / {p90:>5.1f}" + (f" ({100 * failed:.0f}% f)" if failed else "       "))
        (_, _, mabs, p90), failed, limited = per_label[DEFAULT_METHOD][lab]
        sigma = cramer_rao_mv(cats[lab])
        ok = mabs <= TARGET_MEDIAN_MV and p90 <= TARGET_P90_MV and failed == 0
        met += ok
        print(f"{lab:<32}" + "".join(f"{c:>26}" for c in cells) + f"{0.674 * sigma:>8.1f} / {1.645 * sigma:>5.1f}"
              f"{'met' if ok else 'NOT':>8}{100 * limited:>8.0f}%")
    print(f"target met on {met} of {len(per_label[DEFAULT_METHOD])} categories ({DEFAULT_METHOD})")

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


_LONG_CURVE = """
import resource, sys, time
import numpy as np
from compensator.calibration.batch import analyse_iv_files
from compensator.calibration.synthetic import leakage_at_crossing_a, simulate_iv
n, path, mode = int(sys.argv[1]), sys.argv[2], sys.argv[3]
grid = np.linspace(20.0, 31.0, n)
rng = np.random.default_rng(1)
current = simulate_iv(rng, grid, [24.5], relative_noise=0.005, geiger_scale_v=1.5)[0]
with open(path, "w") as fh:
    fh.write("bias_v,current_a\\n")
    np.savetxt(fh, np.column_stack([grid, current]), fmt=("%.7f", "%.6e"), delimiter=",")
before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
start = time.perf_counter()
if mode == "tool":
    rec = analyse_iv_files([path])[0]
    found, ok = rec.breakdown_v, rec.ok
else:  # baseline: read with numpy, raw maximum of d ln I/dV
    data = np.loadtxt(path, delimiter=",", skiprows=1)
    d = np.diff(np.log(data[:, 1])) / np.diff(data[:, 0])
    found, ok = 0.5 * (data[1:, 0] + data[:-1, 0])[np.argmax(d)], True
secs = time.perf_counter() - start
peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
print(secs, peak / 1024.0, found, ok)
"""


def bench_long_curve(n_points):
    """Time and peak memory (resident set, MiB) of one densely sampled curve from CSV, in a fresh process."""
    import subprocess
    import sys

    print(f"\none I-V curve of {n_points:,} points from a CSV file (fresh process each; target <= 10 s and <= 1 GB):")
    with tempfile.TemporaryDirectory() as tmp:
        for mode, name in (("tool", "analyse_iv_files (default method)"), ("base", "numpy loadtxt + raw max (base)")):
            out = subprocess.run([sys.executable, "-c", _LONG_CURVE, str(n_points), str(Path(tmp) / "long.csv"), mode],
                                 capture_output=True, text=True, check=True).stdout.split()
            secs, mib, found = float(out[0]), float(out[1]), float(out[2])
            verdict = "met" if (mode == "base" or (secs <= 10 and mib <= 1024)) else "NOT met"
            print(f"  {name:<38}{secs:>8.2f} s{mib:>9.0f} MiB peak   breakdown {found:.4f} V (true 24.5000)"
                  + (f"  -> {verdict}" if mode == "tool" else ""))


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
    parser.add_argument("--long-points", type=int, default=1_000_000,
                        help="points of the one long curve (default 1,000,000; 0 skips)")
    parser.add_argument("--quick", action="store_true",
                        help="small sizes: 3,300 curves, 40 spectra, 200 files, a 100,000-point curve")
    args = parser.parse_args(argv)
    if args.quick:
        args.curves, args.spectra, args.files, args.long_points = 3300, 40, 200, 100_000
    jobs = args.jobs or default_jobs()
    bench_iv(args.curves, args.seed, args.files)
    if args.long_points:
        bench_long_curve(args.long_points)
    if args.spectra:
        bench_spectra(args.spectra, args.seed, jobs)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
