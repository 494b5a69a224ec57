"""``compensator demo``: the main job, end to end, on the bundled demo profiles.

The scenario: outdoor radiation monitors in mountain huts, enclosure
temperature -25 to +45 C; three invented SiPM types on two invented boards and
an invented cooler. The demo

1. characterises a sensor from seeded synthetic bench I-V curves (breakdown
   per curve, then the temperature coefficient) and compares with the profile;
2. for each instrument, shows the gain drift at fixed bias and what a
   compensation law leaves, with its gain-error budget;
3. sizes the microcontroller lookup table for a gain-error bound (and writes
   the C code with ``--out DIR``);
4. tunes (robust PI) and verifies the cooler loop and the bias-supply loop.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

from compensator.cli._common import add_json_flag, format_table, positive_float, print_json
from compensator.errors import InputError, Problem
from compensator.physics.sipm import evaluate, gain
from compensator.profiles import load_board, load_sipm, load_thermal

ORDER = 1

#: (sipm profile, board profile, nominal overvoltage in volt) of each demo instrument.
DEMO_INSTRUMENTS = (
    ("hut-sipm-a.yaml", "hut-board-ntc.yaml", 3.0),
    ("hut-sipm-b.yaml", "hut-board-pt1000.yaml", 4.0),
    ("hut-sipm-c.yaml", "hut-board-pt1000.yaml", 5.0),
)
DEMO_COOLER = "hut-cooler.yaml"
DEMO_TABLE_BOUND_PCT = 0.05
DEMO_SEED = 2026

SAFETY = (
    "caution: SiPM bias supplies deliver tens of volts (above 60 V dc is hazardous live under IEC 61010-1 in dry "
    "conditions); coolers can overheat an unsinked hot side or drive a cold plate below the dew point. These are "
    "models for planning; wiring, enclosures and field installation follow local codes and licensed practice."
)


def register(subparsers) -> None:
    parser = subparsers.add_parser("demo", help="run the main job end to end on the bundled demo profiles")
    parser.add_argument("--profiles", default="hardware_profiles", metavar="DIR",
                        help="directory holding the demo profiles (default: hardware_profiles)")
    parser.add_argument("--step-c", type=positive_float, default=10.0, metavar="K",
                        help="temperature step of the printed tables, kelvin (default 10)")
    parser.add_argument("--out", metavar="DIR",
                        help="also write each instrument's lookup table as C99 (DIR/<sipm>/) ; never overwrites")
    add_json_flag(parser)
    parser.set_defaults(handler=run)


def instrument_model(law, sipm_profile, board_profile, table, temps_c) -> dict:
    """Gain drift at fixed bias against the law and against the firmware's integer path, over temperature.

    The fixed bias is the one giving the law's overvoltage at 25 C. The law's
    supply output has the series-resistor drop added back. The firmware path
    is the whole chain: temperature -> ADC code -> lookup table -> DAC code ->
    supply output -> bias at the sensor after the filter resistor. Gains are
    evaluated at the bias that really reaches the sensor.
    """
    from compensator.physics.supply import sipm_bias_v

    device, supply = sipm_profile.device, board_profile.supply
    temps_c = np.asarray(temps_c, dtype=float)
    fixed_bias_v = float(device.breakdown.breakdown_v(25.0)) + law.overvoltage_v
    nominal_gain = float(gain(device, fixed_bias_v, 25.0))
    fixed = evaluate(device, temps_c, bias_v=fixed_bias_v)
    supply_v = law.output_v(temps_c)
    at_sensor_v = sipm_bias_v(supply, device, supply_v, temps_c)
    adc_code = board_profile.temperature.adc_code(temps_c)
    dac_code, _ = table.lookup(adc_code)
    firmware_v = sipm_bias_v(supply, device, supply.output_v(dac_code), temps_c)
    return {
        "temp_c": temps_c,
        "breakdown_v": device.breakdown.breakdown_v(temps_c),
        "adc_code": adc_code,
        "fixed_bias_v": fixed_bias_v,
        "fixed_gain_error_pct": 100.0 * (fixed.gain / nominal_gain - 1.0),
        "law_supply_v": supply_v,
        "series_drop_mv": 1e3 * (supply_v - at_sensor_v),
        "law_gain_error_pct": 100.0 * (gain(device, at_sensor_v, temps_c) / nominal_gain - 1.0),
        "firmware_dac_code": dac_code,
        "firmware_gain_error_pct": 100.0 * (gain(device, firmware_v, temps_c) / nominal_gain - 1.0),
        "dark_rate_hz": evaluate(device, temps_c, bias_v=at_sensor_v).dark_rate_hz,
    }


def characterise(sipm_profile, seed: int = DEMO_SEED) -> dict:
    """Recover breakdown and tempco from seeded synthetic I-V curves of the sensor type.

    The profile's breakdown model is the truth; curves at -20..40 C carry 1 %
    noise and a Geiger-probability bend, as a bench would give.
    """
    from compensator.calibration.iv import find_breakdown
    from compensator.calibration.synthetic import simulate_iv
    from compensator.calibration.tempco import fit_tempco

    truth = sipm_profile.device.breakdown
    rng = np.random.default_rng(seed)
    temps_c = np.arange(-20.0, 40.1, 10.0)
    true_v = truth.breakdown_v(temps_c)
    bias_v = np.arange(true_v.min() - 1.5, true_v.max() + 3.0, 0.01)
    current_a = simulate_iv(rng, bias_v, true_v, geiger_scale_v=0.8, relative_noise=0.01)
    found = find_breakdown(bias_v, current_a)
    fit = fit_tempco(temps_c, found.breakdown_v, found.breakdown_err_v, ref_temp_c=truth.ref_temp_c)
    return {
        "sipm": sipm_profile.name, "curve_count": int(temps_c.size), "temp_c": temps_c,
        "breakdown_v": found.breakdown_v, "breakdown_err_v": found.breakdown_err_v, "true_breakdown_v": true_v,
        "tempco_mv_per_k": fit.tempco_mv_per_k, "tempco_err_mv_per_k": fit.tempco_err_mv_per_k,
        "true_tempco_mv_per_k": truth.tempco_mv_per_k,
        "breakdown_v_at_ref": fit.breakdown_v_at_ref, "breakdown_err_v_at_ref": fit.breakdown_err_v,
        "true_breakdown_v_at_ref": truth.breakdown_v_at_ref, "ref_temp_c": truth.ref_temp_c,
    }


def build_tables(law, board_profile):
    """The optimised table at the demo bound and the smallest uniform one, as a baseline."""
    from compensator.firmware.tables import build_table

    return (build_table(law, board_profile, DEMO_TABLE_BOUND_PCT, layout="optimised"),
            build_table(law, board_profile, DEMO_TABLE_BOUND_PCT, layout="uniform"))


def table_summary(law, table, uniform, sipm_profile, board_profile, out_dir: Path | None) -> dict:
    """Verify the table at every ADC code of the range; optionally write its C99 and sweep."""
    from compensator.fileio import write_files_atomic
    from compensator.firmware.table_c import render_sweep_csv, render_table_c
    from compensator.firmware.tables import sweep_table

    sweep = sweep_table(table, law, board_profile)
    files = []
    if out_dir is not None:
        rendered = render_table_c(table, [sipm_profile, board_profile])
        files = [str(p) for p in write_files_atomic(out_dir / sipm_profile.name,
                                                    {**rendered, "sweep.csv": render_sweep_csv(sweep)},
                                                    what="table output")]
    return {
        "bound_pct": DEMO_TABLE_BOUND_PCT,
        "optimised_entries": table.entries, "optimised_table_bytes": table.table_bytes,
        "uniform_entries": uniform.entries, "uniform_table_bytes": uniform.table_bytes,
        "codes_verified": int(sweep.adc_code.size), "max_gain_error_pct": sweep.max_gain_error_pct,
        "files": files,
    }


def loop_summaries(cooler_profile, board_profile, ambient_range_c=(-25.0, 45.0)) -> list[dict]:
    """Tune (robust PI, Ms <= 1.4) and verify the cooler loop over the field's ambient range, and the bias loop
    when the board reads its bias back (else the bias is set open-loop and no loop is tuned)."""
    from compensator.loops import design

    results = [("cooler", cooler_profile.name,
                design.design_cooler_loop(cooler_profile.cooler, method="robust", ambient_range_c=ambient_range_c))]
    if board_profile.bias_readback is not None:
        results.append(("bias supply", board_profile.name, design.design_bias_loop(board_profile, method="robust")))
    out = []
    for loop, source, res in results:
        r = res.report
        entry = {
            "loop": loop, "profile": source, "rate_hz": 1.0 / res.sample_time_s, "kp": res.gains.kp,
            "ki_per_s": res.gains.ki_per_s, "kp_unit": res.units.kp_unit, "ki_unit": res.units.ki_unit,
            "stable": res.ok, "gain_margin": r.margins.gain_margin, "phase_margin_deg": r.margins.phase_margin_deg,
            "ms": r.margins.ms if res.ambient is None else res.ambient.worst_ms,
            "settling_time_s": r.step.settling_time_s, "overshoot_pct": r.step.overshoot_pct,
            "warnings": [f"{f.severity.value}: {f.message}" for f in res.findings],
        }
        if res.ambient is not None:
            entry["ambient_check"] = [{"ambient_temp_c": c.ambient_temp_c, "ms": c.ms, "dew_point_c": c.dew_point_c,
                                       "hot_temp_c": c.hot_temp_c, "condensation": c.condensation,
                                       "stable": c.stable} for c in res.ambient.checks]
        out.append(entry)
    if board_profile.bias_readback is None:
        out.append({"loop": "bias supply", "profile": board_profile.name, "open_loop": True,
                    "warnings": [design.NO_READBACK]})
    return out


DEMO_LIGHT_HZ = (0.0, 1e6, 1e7, 1e8)


def light_summary(sipm_profile, board_profile, overvoltage_v, temps_c) -> list[dict] | None:
    """Largest gain error over temperature at several light levels, drop corrected from the modelled
    (dark) current against the measured current; ``None`` when the board has no current sense."""
    from compensator.law import build_law, gain_error_at_light_pct

    if board_profile.current_sense is None:
        return None
    laws = {mode: build_law(sipm_profile, board_profile, overvoltage_v, kind="constant_gain", drop_correction=mode)
            for mode in ("modelled", "measured")}
    return [{"photon_rate_hz": rate,
             **{f"{mode}_max_gain_error_pct": float(np.max(np.abs(
                 gain_error_at_light_pct(law, board_profile, rate, temps_c)))) for mode, law in laws.items()}}
            for rate in DEMO_LIGHT_HZ]


def _require(root: Path, name: str) -> Path:
    path = root / name
    if not path.is_file():
        raise InputError(Problem(str(path), 0, "", "demo profile not found (run from the project's top folder "
                                                  "or pass --profiles DIR)"))
    return path


def run(args) -> int:
    from compensator.law import build_law, electronics_terms, gain_error_budget

    root = Path(args.profiles)
    out_dir = Path(args.out) if args.out else None
    say = (lambda *a: None) if args.json else print
    print(SAFETY, file=sys.stderr)
    lo_c, hi_c = -25.0, 45.0
    temps_c = np.arange(lo_c, hi_c + 1e-9, args.step_c)
    loaded = [(load_sipm(_require(root, s)), load_board(_require(root, b)), ov) for s, b, ov in DEMO_INSTRUMENTS]

    # 1. Characterise
    char = characterise(loaded[0][0])
    say(f"== 1. characterise {char['sipm']} from {char['curve_count']} synthetic bench I-V curves (-20..40 C, seed "
        f"{DEMO_SEED})")
    say(f"breakdown at {char['ref_temp_c']:g} C: {char['breakdown_v_at_ref']:.4f} +- {char['breakdown_err_v_at_ref']:.4f} V "
        f"(truth {char['true_breakdown_v_at_ref']:g}); tempco {char['tempco_mv_per_k']:.2f} +- "
        f"{char['tempco_err_mv_per_k']:.2f} mV/K (truth {char['true_tempco_mv_per_k']:g}); the errors are "
        f"statistical only: the method's own shape bias is up to about 12 mV (tools/bench/bench_calibration.py)")

    report = {"scenario": "mountain-hut radiation monitors, enclosure -25 to +45 C", "characterisation": char,
              "instruments": []}
    for sipm_profile, board_profile, ov in loaded:
        device = sipm_profile.device
        law = build_law(sipm_profile, board_profile, ov, kind="constant_gain")
        table, uniform = build_tables(law, board_profile)
        model = instrument_model(law, sipm_profile, board_profile, table, temps_c)
        budget = gain_error_budget(law, board_profile, samples=2000)
        tables = table_summary(law, table, uniform, sipm_profile, board_profile, out_dir)
        report["instruments"].append({
            "sipm": sipm_profile.name, "board": board_profile.name, "overvoltage_v": ov, **model,
            "budget": {"rss_pct": budget.rss_pct, "worst_case_pct": budget.worst_case_pct,
                       "calibrated_rss_pct": budget.calibrated_rss_pct,
                       "calibrated_worst_case_pct": budget.calibrated_worst_case_pct,
                       "dominant": budget.dominant, "calibrated_dominant": budget.calibrated_dominant,
                       "monte_carlo_std_pct": budget.monte_carlo.std_pct if budget.monte_carlo else None,
                       "electronics_terms": [{"key": t.key, "limit_pct": t.limit_pct,
                                              "calibrated_limit_pct": t.calibrated_limit_pct}
                                             for t in electronics_terms(budget)]},
            "table": tables,
        })
        say(f"\n== 2. {sipm_profile.name} on {board_profile.name}: Vbd {device.breakdown.breakdown_v_at_ref:g} V at "
            f"{device.breakdown.ref_temp_c:g} C, {device.breakdown.tempco_mv_per_k:g} mV/K, overvoltage {ov:g} V, "
            f"constant-gain law")
        say(format_table(
            list(zip(model["temp_c"], model["breakdown_v"], model["fixed_gain_error_pct"], model["law_supply_v"],
                     model["series_drop_mv"], model["law_gain_error_pct"], model["adc_code"].tolist(),
                     model["firmware_dac_code"].tolist(), model["firmware_gain_error_pct"], model["dark_rate_hz"] / 1e3)),
            ["temp_c", "breakdown_v", "fixed_bias_gain_%", "law_supply_v", "series_drop_mv", "law_gain_%",
             "adc_code", "table_dac_code", "firmware_gain_%", "dark_khz"],
            [".1f", ".3f", "+.2f", ".4f", ".2f", "+.3f", "d", "d", "+.3f", ".1f"]))
        say(f"gain swing at fixed bias {model['fixed_bias_v']:.3f} V: {np.ptp(model['fixed_gain_error_pct']):.1f} % "
            f"over {lo_c:g}..{hi_c:g} C; with the law: {np.ptp(model['law_gain_error_pct']):.3f} %; through the "
            f"firmware's integer path: {np.ptp(model['firmware_gain_error_pct']):.3f} %")
        say(f"budget of what the hardware adds: {budget.rss_pct:.2f} % (1 sigma) as built, dominated by "
            f"{budget.dominant}; {budget.calibrated_rss_pct:.2f} % after a one-point calibration, dominated by "
            f"{budget.calibrated_dominant}")
        drift = sorted(electronics_terms(budget), key=lambda t: -t.calibrated_limit_pct)[:4]
        say("electronics drift and lag after calibration (limit, largest over the range): " + "; ".join(
            f"{t.name} {t.calibrated_limit_pct:.3f} %" for t in drift))
        say(f"== 3. lookup table at {tables['bound_pct']:g} %: optimised {tables['optimised_entries']} entries "
            f"({tables['optimised_table_bytes']} B), smallest uniform {tables['uniform_entries']} entries "
            f"({tables['uniform_table_bytes']} B); {tables['codes_verified']} ADC codes verified, worst "
            f"{tables['max_gain_error_pct']:.4f} %")
        for f in tables["files"]:
            say(f"wrote {f}")
        light = light_summary(sipm_profile, board_profile, ov, temps_c)
        report["instruments"][-1]["light"] = light
        if light:
            say("under light, largest gain error over the range through the integer path, drop corrected from the "
                "modelled dark current vs from the measured current:")
            say(format_table([(r["photon_rate_hz"], r["modelled_max_gain_error_pct"], r["measured_max_gain_error_pct"])
                              for r in light], ["photon_rate_hz", "modelled_%", "measured_%"], [".0e", ".3f", ".3f"]))
    cooler = load_thermal(_require(root, DEMO_COOLER))
    report["loops"] = loop_summaries(cooler, loaded[0][1])
    say("\n== 4. loops tuned for Ms <= 1.4 (robust PI; the cooler at every ambient of -25..45 C) and verified with "
        "python-control at the firmware rate, zero-order hold and one sample of computation delay")
    say(format_table(
        [(lp["loop"], lp["profile"], lp["rate_hz"], lp["kp"], lp["ki_per_s"], lp["gain_margin"], lp["phase_margin_deg"],
          lp["ms"], lp["settling_time_s"], lp["overshoot_pct"], "yes" if lp["stable"] else "NO")
         for lp in report["loops"] if not lp.get("open_loop")],
        ["loop", "profile", "rate_hz", "kp", "ki_per_s", "gain_margin", "phase_margin_deg", "ms", "settling_s",
         "overshoot_%", "stable"],
        ["", "", "g", ".4g", ".4g", ".2f", ".1f", ".3f", ".3g", ".1f", ""]))
    for lp in report["loops"]:
        if lp.get("ambient_check"):
            say(f"{lp['loop']} over the ambient range (Ms is the worst over it):")
            say(format_table([(c["ambient_temp_c"], c["ms"], c["hot_temp_c"], c["dew_point_c"],
                               "YES" if c["condensation"] else "no") for c in lp["ambient_check"]],
                             ["ambient_c", "ms", "hot_side_c", "dew_point_c", "condensation"],
                             ["g", ".3f", ".1f", ".1f", ""]))
        for warning in lp["warnings"]:
            print(f"warning: {lp['loop']}: {warning}", file=sys.stderr)
    if args.json:
        print_json(report)
    return 0 if all(lp["stable"] for lp in report["loops"] if not lp.get("open_loop")) else 1
