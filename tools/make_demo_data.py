"""Write seeded synthetic bench data for the demo scenario, with its known truth.

Scenario (invented): a production batch of the low-voltage SiPM fitted in the
mountain-hut radiation monitors is characterised on the bench before the
monitors go up to the huts, over the enclosure range -20 to +40 C. The data
are synthetic (compensator.calibration.synthetic and
compensator.calibration.spectrum.simulate_spectrum), never measured.

Usage::

    python tools/make_demo_data.py OUTDIR [--force]

Writes, under OUTDIR:

* ``iv/chNN_TTC.csv``: I-V curves (bias_v, current_a, temp_c, plus an extra
  ``range`` column that readers ignore) for 4 channels at -20 ... +40 C;
* ``gain/gain_TTC.csv``: gain tables (bias_v, gain, gain_err, temp_c) of channel 1 at the same
  temperatures (their gain-intercept breakdown sits ``iv_definition_offset_v`` below the I-V one);
* ``spectra/ch01_25C_BB.BV.csv`` and ``spectra/manifest.csv``: charge spectra
  (charge_pc, counts) of channel 1 at 25 C and five biases;
* ``breakdown_scan.csv``: breakdown against temperature (temp_c, breakdown_v, breakdown_err_v);
* ``truth.json``: the true parameters everything was generated from.

The same OUTDIR content comes out on every run (seeded; no timestamps).
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

import numpy as np

from compensator.calibration.spectrum import simulate_spectrum
from compensator.calibration.synthetic import breakdown_at, simulate_breakdown_scan, simulate_gain_scan, simulate_iv
from compensator.constants import ELEMENTARY_CHARGE_C
from compensator.errors import CompensatorError, InputError, Problem
from compensator.fileio import write_file_atomic

SEED = 20260301

#: True parameters of the invented batch (values for demos only).
TRUTH = {
    "scenario": "invented SiPM batch for the mountain-hut radiation monitors (synthetic data)",
    "seed": SEED,
    "ref_temp_c": 25.0,
    "breakdown_v_at_ref": 24.46,
    "tempco_mv_per_k": 21.8,
    "curvature_mv_per_k2": 0.0,
    "channel_offsets_v": [0.0, 0.035, -0.028, 0.061],
    # The I-V breakdown (inverse logarithmic derivative) of these invented devices sits this far
    # above their gain-intercept breakdown (published comparisons find tens to hundreds of mV,
    # the I-V one above: Chmill et al., NIM A 845, 56, 2017); gain scans are of channel 1.
    "iv_definition_offset_v": 0.12,
    "capacitance_f": 158e-15,
    "capacitance_tempco_ppm_per_k": -200.0,
    "iv": {"exponent": 2.0, "geiger_scale_v": 1.5, "avalanche_a": 8e-7, "leakage_a": 1.5e-10,
           "relative_noise": 0.004, "noise_floor_a": 2e-12, "bias_step_v": 0.05,
           "below_breakdown_v": 3.0, "above_breakdown_v": 5.0},
    "temperatures_c": [-20.0, -10.0, 0.0, 10.0, 20.0, 30.0, 40.0],
    "gain_scan": {"overvoltages_v": [1.5, 2.0, 2.5, 3.0, 3.5, 4.0, 4.5], "relative_noise": 0.002},
    "spectra": {"temp_c": 25.0, "overvoltages_v": [2.0, 2.5, 3.0, 3.5, 4.0], "pedestal_pc": 0.05, "sigma0_pc": 0.045, "sigma1_pc": 0.02, "mean_pe": 2.2,
                "crosstalk_at_3v": 0.08, "n_events": 60000, "bin_width_pc": 0.01, "amplifier_gain": 1.0},
    "breakdown_scan": {"temps_c": [-20.0, -15.0, -10.0, -5.0, 0.0, 5.0, 10.0, 15.0, 20.0, 25.0, 30.0, 35.0, 40.0],
                       "noise_v": 0.004},
}


def _csv(header, columns, formats) -> str:
    lines = [",".join(header)]
    for row in zip(*columns):
        lines.append(",".join(format(v, f) if not isinstance(v, str) else v for v, f in zip(row, formats)))
    return "\n".join(lines) + "\n"


def _capacitance_f(temp_c):
    t = TRUTH
    return t["capacitance_f"] * (1.0 + 1e-6 * t["capacitance_tempco_ppm_per_k"] * (np.asarray(temp_c) - t["ref_temp_c"]))


def build_files() -> dict:
    """All demo files as ``{relative path: text}`` plus ``truth.json`` (deterministic)."""
    t = TRUTH
    rng = np.random.default_rng(SEED)
    files = {}
    truth_out = json.loads(json.dumps(t))
    truth_out["iv_curves"] = []

    ivp = t["iv"]
    for ch, offset in enumerate(t["channel_offsets_v"], start=1):
        for temp in t["temperatures_c"]:
            vbd = float(breakdown_at(temp, t["breakdown_v_at_ref"] + offset + t["iv_definition_offset_v"],
                                     t["tempco_mv_per_k"],
                                     ref_temp_c=t["ref_temp_c"], curvature_mv_per_k2=t["curvature_mv_per_k2"]))
            start = np.floor((vbd - ivp["below_breakdown_v"]) * 10) / 10
            bias = np.round(start + ivp["bias_step_v"] * np.arange(
                int(round((ivp["below_breakdown_v"] + ivp["above_breakdown_v"]) / ivp["bias_step_v"])) + 1), 4)
            cur = simulate_iv(rng, bias, [vbd], exponent=ivp["exponent"], geiger_scale_v=ivp["geiger_scale_v"],
                              avalanche_a=ivp["avalanche_a"], leakage_a=ivp["leakage_a"],
                              relative_noise=ivp["relative_noise"], noise_floor_a=ivp["noise_floor_a"])[0]
            temp_col = np.round(temp + 0.05 * rng.standard_normal(bias.size), 3)
            name = f"iv/ch{ch:02d}_{int(temp):+d}C.csv".replace("+", "p").replace("-", "m")
            files[name] = _csv(["bias_v", "current_a", "temp_c", "range"],
                               [bias, cur, temp_col, ["2uA" if c < 2e-6 else "20uA" for c in cur]],
                               [".4f", ".6e", ".3f", ""])
            truth_out["iv_curves"].append({"file": name, "channel": ch, "temp_c": temp, "breakdown_v": round(vbd, 6)})

    gsp = t["gain_scan"]
    truth_out["gain_scans"] = []
    for temp in t["temperatures_c"]:
        vbd = float(breakdown_at(temp, t["breakdown_v_at_ref"], t["tempco_mv_per_k"], ref_temp_c=t["ref_temp_c"]))
        bias = np.round(vbd + np.asarray(gsp["overvoltages_v"]), 4)
        cap = float(_capacitance_f(temp))
        gain, err = simulate_gain_scan(rng, bias, vbd, cap, relative_noise=gsp["relative_noise"])
        name = f"gain/gain_{int(temp):+d}C.csv".replace("+", "p").replace("-", "m")
        files[name] = _csv(["bias_v", "gain", "gain_err", "temp_c"], [bias, gain, err, np.full(bias.size, temp)],
                           [".4f", ".1f", ".1f", ".2f"])
        truth_out["gain_scans"].append({"file": name, "temp_c": temp, "breakdown_v": round(vbd, 6), "capacitance_f": cap})

    sp = t["spectra"]
    vbd = float(breakdown_at(sp["temp_c"], t["breakdown_v_at_ref"], t["tempco_mv_per_k"], ref_temp_c=t["ref_temp_c"]))
    cap = float(_capacitance_f(sp["temp_c"]))
    manifest = ["file,bias_v,temp_c"]
    truth_out["spectra_files"] = []
    for ov in sp["overvoltages_v"]:
        bias = round(vbd + ov, 3)
        gain_pc = cap * (bias - vbd) * 1e12 * sp["amplifier_gain"]
        xt = min(sp["crosstalk_at_3v"] * (ov / 3.0) ** 2, 0.5)
        charge, counts = simulate_spectrum(rng, gain=gain_pc, pedestal=sp["pedestal_pc"], sigma0=sp["sigma0_pc"],
                                           sigma1=sp["sigma1_pc"], mean_pe=sp["mean_pe"], crosstalk=xt,
                                           n_events=sp["n_events"], bin_width=sp["bin_width_pc"])
        name = f"spectra/ch01_25C_{bias:.3f}V.csv"
        files[name] = _csv(["charge_pc", "counts"], [charge, counts], [".5f", ".0f"])
        manifest.append(f"{Path(name).name},{bias:.3f},{sp['temp_c']:.1f}")
        truth_out["spectra_files"].append({"file": name, "bias_v": bias, "gain_pc": gain_pc, "crosstalk": xt,
                                           "gain_electrons": gain_pc * 1e-12 / ELEMENTARY_CHARGE_C})
    files["spectra/manifest.csv"] = "\n".join(manifest) + "\n"

    bs = t["breakdown_scan"]
    temps = np.asarray(bs["temps_c"])
    vbd, err = simulate_breakdown_scan(rng, temps, t["breakdown_v_at_ref"], t["tempco_mv_per_k"],
                                       ref_temp_c=t["ref_temp_c"], curvature_mv_per_k2=t["curvature_mv_per_k2"],
                                       noise_v=bs["noise_v"])
    files["breakdown_scan.csv"] = _csv(["temp_c", "breakdown_v", "breakdown_err_v"], [temps, vbd, err],
                                       [".2f", ".5f", ".4f"])
    files["truth.json"] = json.dumps(truth_out, indent=2, sort_keys=True) + "\n"
    return files


def write_demo_data(outdir, force=False) -> list:
    """Write the demo data set into ``outdir`` (created if missing).

    Parameters
    ----------
    outdir : str or path-like
    force : bool
        Replace files of an earlier run; without it an existing file is an error
        and nothing is written.

    Returns
    -------
    list of Path
        The files written.
    """
    outdir = Path(outdir)
    files = build_files()
    if not force:
        clash = [rel for rel in files if (outdir / rel).exists()]
        if clash:
            raise InputError(Problem(str(outdir / clash[0]), 0, "",
                                     f"already exists ({len(clash)} demo files would be replaced; use --force)"))
    written = []
    for rel, text in sorted(files.items()):
        path = outdir / rel
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise InputError(Problem(str(path.parent), 0, "", f"cannot create directory: {exc.strerror or exc}")) from None
        written.append(write_file_atomic(path, text, overwrite=force))
    return written


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description="Write seeded synthetic demo bench data with known truth.")
    parser.add_argument("outdir", help="output directory (created if missing)")
    parser.add_argument("--force", action="store_true", help="replace files of an earlier run")
    args = parser.parse_args(argv)
    try:
        written = write_demo_data(args.outdir, force=args.force)
    except CompensatorError as exc:
        for line in str(exc).splitlines():
            print(f"make_demo_data: {line}", file=sys.stderr)
        return 2
    print(f"wrote {len(written)} files under {args.outdir}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
