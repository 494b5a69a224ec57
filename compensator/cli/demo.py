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
4. tunes (robust PI) and verifies the cooler loop and the bias-supply loop;
5. simulates a week of the hut's weather with the firmware in the loop
   (``compensator simulate`` on the bundled scenario).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

from compensator.cli._common import (
    EXIT_FAILURE,
    EXIT_OK,
    add_json_flag,
    bounded_float,
    caution,
    format_number,
    format_table,
    print_json,
)
from compensator.errors import InputError, Problem
from compensator.profiles import load_board, load_sipm, load_thermal

__all__ = ["register", "run", "characterisation_line", "DEMO_INSTRUMENTS", "DEMO_COOLER", "DEMO_SEED", "SAFETY"]

ORDER = 1

#: (sipm profile, board profile, nominal overvoltage in volt) of each demo instrument.
DEMO_INSTRUMENTS = (
    ("hut-sipm-a.yaml", "hut-board-ntc.yaml", 3.0),
    ("hut-sipm-b.yaml", "hut-board-pt1000.yaml", 4.0),
    ("hut-sipm-c.yaml", "hut-board-pt1000.yaml", 5.0),
)
DEMO_COOLER = "hut-cooler.yaml"
DEMO_SEED = 2026
#: The enclosure's range in the scenario, degree Celsius (the rows printed span it).
DEMO_RANGE_C = (-25.0, 45.0)
#: Smallest print step, kelvin: at most 701 rows per table over the 70 K range.
MIN_STEP_K = 0.1

SAFETY = (
    "caution: SiPM bias supplies deliver tens of volts (above 60 V dc is hazardous live under IEC 61010-1 in dry "
    "conditions); coolers can overheat an unsinked hot side or drive a cold plate below the dew point. These are "
    "models for planning; wiring, enclosures and field installation follow local codes and licensed practice."
)


def register(subparsers) -> None:
    from compensator.cli.simulate import simulated_days

    parser = subparsers.add_parser("demo", help="run the main job end to end on the bundled demo profiles")
    parser.add_argument("--profiles", default=None, metavar="DIR",
                        help="directory holding the demo profiles and scenario (default: the bundled ones)")
    parser.add_argument("--step-c", type=bounded_float(MIN_STEP_K, 100.0, unit="K"), default=10.0, metavar="K",
                        help=f"temperature step of the printed rows, kelvin ({MIN_STEP_K:g} to 100, default 10); "
                             "the headline figures cover every ADC code of the range whatever the step")
    parser.add_argument("--out", metavar="DIR",
                        help="also write each instrument's lookup table as C99 and its sweep (DIR/<sipm>/) and the "
                             "simulated week's figures and report (DIR/simulation/); every target is checked before "
                             "anything is written")
    parser.add_argument("--force", action="store_true", help="replace existing files under --out")
    parser.add_argument("--days", type=simulated_days(), default=None, metavar="D",
                        help="length of the simulated stretch of weather, days (default: the scenario's "
                             "run.duration_days, a week)")
    add_json_flag(parser)
    parser.set_defaults(handler=run)


def _require(root: Path, name: str) -> Path:
    path = root / name
    if not path.is_file():
        raise InputError(Problem(str(path), 0, "", "demo profile not found (run from the project's top folder "
                                                  "or pass --profiles DIR)"))
    return path


def _refuse_existing(out: Path, root: Path, sipm_names, *, overwrite: bool) -> None:
    """Refuse the run before its long work when a file it will write is in the way (checked again at writing)."""
    from compensator.fileio import check_targets
    from compensator.firmware.table_c import DEFAULT_FUNCTION_NAME
    from compensator.profiles import load_scenario
    from compensator.profiles.bundled import DEMO_SCENARIO
    from compensator.sim.report import FIGURES

    scenario = load_scenario(_require(root, DEMO_SCENARIO))
    figures = FIGURES if scenario.section("monte_carlo")["units"] else FIGURES[:3]
    targets = [out / name / f for name in sipm_names
               for f in (f"{DEFAULT_FUNCTION_NAME}.h", f"{DEFAULT_FUNCTION_NAME}.c", "sweep.csv")]
    targets += [out / "simulation" / f for f in (*figures, "report.html")]
    problems = check_targets(targets, overwrite=overwrite)
    if problems:
        raise InputError(problems)


def _pct(value: float, spec: str = ".3f") -> str:
    return f"{format_number(value, spec)} %"


def run(args) -> int:
    from compensator.fileio import write_file_set
    from compensator.instrument import characterise_breakdown, evaluate_instrument, render_table_files, tune_loops

    from compensator.profiles.bundled import bundled_profiles_dir

    root = Path(args.profiles) if args.profiles else bundled_profiles_dir()
    say = (lambda *a: None) if args.json else print
    lo_c, hi_c = DEMO_RANGE_C
    temps_c = np.arange(lo_c, hi_c + 1e-9, args.step_c)
    loaded = [(load_sipm(_require(root, s)), load_board(_require(root, b)), ov) for s, b, ov in DEMO_INSTRUMENTS]
    cooler = load_thermal(_require(root, DEMO_COOLER))
    if args.out:
        _refuse_existing(Path(args.out), root, [sipm.name for sipm, _, _ in loaded], overwrite=args.force)
    caution(SAFETY)

    # 1. Characterise
    char = characterise_breakdown(loaded[0][0], seed=DEMO_SEED)
    say(f"== 1. characterise {char.sipm} from {char.curve_count} synthetic bench I-V curves (-20..40 C, seed "
        f"{char.seed})")
    say(characterisation_line(char))

    # 2. and 3. Each instrument: drift, law, firmware path, budget, table, light
    instruments, files = [], {}
    for sipm_profile, board_profile, ov in loaded:
        inst = evaluate_instrument(sipm_profile, board_profile, overvoltage_v=ov, temps_c=temps_c)
        instruments.append(inst)
        if args.out:
            for name, text in render_table_files(inst, sipm_profile, board_profile).items():
                files[Path(args.out) / sipm_profile.name / name] = text
        _print_instrument(say, inst, sipm_profile, (lo_c, hi_c))

    # 4. Loops
    loops = tune_loops(cooler, loaded[0][1])
    say("\n== 4. loops tuned for Ms <= 1.4 (robust PI; the cooler at every ambient of -25..45 C) and verified with "
        "python-control at the firmware rate, zero-order hold and one sample of computation delay")
    closed = [lp for lp in loops if not lp.open_loop]
    say(format_table(
        [(lp.loop, lp.profile, lp.rate_hz, f"{lp.kp:.4g} {lp.kp_unit}", f"{lp.ki_per_s:.4g} {lp.ki_unit}",
          lp.gain_margin, lp.phase_margin_deg, lp.ms, lp.settling_time_s, lp.overshoot_pct,
          "yes" if lp.stable else "NO") for lp in closed],
        ["loop", "profile", "rate_hz", "kp", "ki", "gain_margin", "phase_margin_deg", "ms", "settling_s",
         "overshoot_%", "stable"],
        ["", "", "g", "", "", ".2f", ".1f", ".3f", ".3g", ".1f", ""]))
    for lp in loops:
        if lp.ambient_check:
            say(f"{lp.loop} over the ambient range (Ms above is the largest over it):")
            say(format_table([(c.ambient_temp_c, c.ms, c.hot_temp_c, c.dew_point_c, "YES" if c.condensation else "no")
                              for c in lp.ambient_check],
                             ["ambient_c", "ms", "hot_side_c", "dew_point_c", "condensation"],
                             ["g", ".3f", ".1f", ".1f", ""]))
        if lp.open_loop:
            say(f"{lp.loop} ({lp.profile}): set open-loop, no read-back channel")

    # 5. The simulated week: the bundled scenario through `compensator simulate` (figures and report with --out).
    from compensator.cli.simulate import simulated_week

    say("\n== 5. a simulated week in the hut's weather, firmware in the loop, strategies side by side")
    week, week_files = simulated_week(root, Path(args.out) / "simulation" if args.out else None, say, days=args.days)
    files.update(week_files)

    if files:
        written = write_file_set(files, overwrite=args.force)
        by_sipm = {}
        for path in written:
            by_sipm.setdefault(path.parent.name, []).append(str(path))
        instruments = [_with_files(inst, tuple(by_sipm.get(inst.sipm, ()))) for inst in instruments]
        for path in written:
            say(f"wrote {path}")
    for inst in instruments:
        for finding in inst.findings:
            print(f"compensator: warning: {inst.sipm} on {inst.board}: {finding.message}", file=sys.stderr)
    for lp in loops:
        for finding in lp.findings:
            if finding.severity.value != "info":
                print(f"compensator: {finding.severity.value}: {lp.loop}: {finding.message}", file=sys.stderr)
    if args.json:
        print_json({"scenario": "mountain-hut radiation monitors, enclosure -25 to +45 C", "characterisation": char,
                    "instruments": instruments, "loops": loops, "simulation": week})
    return EXIT_OK if all(lp.stable for lp in loops) else EXIT_FAILURE


def characterisation_line(char) -> str:
    """The characterisation's figures with their one-sigma errors, the breakdown's in its two parts.

    Parameters
    ----------
    char : Characterisation
        From :func:`compensator.instrument.characterise_breakdown`.
    """
    return (f"breakdown at {char.ref_temp_c:g} C: {char.breakdown_v_at_ref:.4f} +- {char.breakdown_err_v_at_ref:.4f} V "
            f"(truth {char.true_breakdown_v_at_ref:g}; {char.breakdown_stat_err_v_at_ref:.4f} V statistical and "
            f"{char.breakdown_sys_err_v_at_ref:.4f} V the method's systematic part, common to all curves, in "
            f"quadrature); tempco {char.tempco_mv_per_k:.2f} +- {char.tempco_err_mv_per_k:.2f} mV/K (truth "
            f"{char.true_tempco_mv_per_k:g}; statistical: the common part does not move the slope); one sigma")


def _with_files(inst, paths):
    from dataclasses import replace

    return replace(inst, table=replace(inst.table, files=paths))


def _print_instrument(say, inst, sipm_profile, range_c) -> None:
    bd = sipm_profile.device.breakdown
    d, b, t = inst.drift, inst.budget, inst.table
    lo_c, hi_c = range_c
    say(f"\n== 2. {inst.sipm} on {inst.board}: Vbd {bd.breakdown_v_at_ref:g} V at {bd.ref_temp_c:g} C, "
        f"{bd.tempco_mv_per_k:g} mV/K, overvoltage {inst.overvoltage_v:g} V, constant-gain law")
    say(format_table(
        list(zip(d.temp_c, d.breakdown_v, d.fixed_gain_error_pct, d.law_supply_v, d.series_drop_mv,
                 d.law_gain_error_pct, d.adc_code.tolist(), d.firmware_dac_code.tolist(), d.firmware_gain_error_pct,
                 d.dark_rate_hz / 1e3)),
        ["temp_c", "breakdown_v", "fixed_bias_gain_%", "law_supply_v", "series_drop_mv", "law_gain_%",
         "adc_code", "table_dac_code", "firmware_gain_%", "dark_khz"],
        [".1f", ".3f", "+.2f", ".4f", ".2f", "+.3f", "d", "d", "+.3f", ".1f"]))
    say(f"gain error against 25 C over every one of the {d.codes_evaluated} ADC codes of {lo_c:g}..{hi_c:g} C, "
        f"at both edges of each code (whatever the rows printed): at fixed bias {d.fixed_bias_v:.3f} V "
        f"{_pct(d.fixed_gain_error_ptp_pct, '.1f')} "
        f"peak-to-peak; with the law {_pct(d.law_gain_error_ptp_pct)} peak-to-peak (largest absolute "
        f"{_pct(d.law_gain_error_max_abs_pct)}); through the firmware's integer path "
        f"{_pct(d.firmware_gain_error_ptp_pct)} peak-to-peak (largest absolute "
        f"{_pct(d.firmware_gain_error_max_abs_pct)})")
    say(f"budget of what the hardware adds: {_pct(b.rss_pct, '.2f')} (1 sigma, root-sum-square) as built, dominated "
        f"by {b.dominant}; {_pct(b.calibrated_rss_pct, '.2f')} after a one-point calibration, dominated by "
        f"{b.calibrated_dominant}")
    if b.electronics_terms:
        say("electronics drift and lag after calibration (limit, largest over the range): " + "; ".join(
            f"{t.name} {_pct(t.calibrated_limit_pct)}" for t in b.electronics_terms[:4]))
    say(f"== 3. lookup table at {t.bound_pct:g} %: the smallest layout that meets it is {t.layout}, {t.entries} entries "
        f"({t.table_bytes} B), "
        + (f"against {t.uniform_table_bytes} B for the smallest uniform table ({t.uniform_entries} entries); "
           if t.uniform_table_bytes else "no uniform table meets the bound; ")
        + f"{t.codes_verified} ADC codes verified, largest absolute gain error {_pct(t.max_gain_error_pct, '.4f')}")
    if inst.light:
        say("under light, largest absolute gain error over the range through the integer path, drop corrected from "
            "the modelled dark current vs from the measured current:")
        say(format_table([(r.photon_rate_hz, r.modelled_max_gain_error_pct, r.measured_max_gain_error_pct)
                          for r in inst.light], ["photon_rate_hz", "modelled_%", "measured_%"], [".0e", ".3f", ".3f"]))
