"""``compensator demo``: the main job on the bundled demo profiles.

The scenario: outdoor radiation monitors in mountain huts, enclosure
temperature -25 to +45 C; three invented SiPM types on two invented boards.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

from compensator.cli._common import add_json_flag, format_table, print_json
from compensator.errors import InputError, Problem
from compensator.physics.sipm import evaluate, gain
from compensator.physics.supply import sipm_bias_v
from compensator.profiles import load_board, load_sipm

ORDER = 1

#: (sipm profile, board profile, nominal overvoltage in volt) of each demo instrument.
DEMO_INSTRUMENTS = (
    ("hut-sipm-a.yaml", "hut-board-ntc.yaml", 3.0),
    ("hut-sipm-b.yaml", "hut-board-pt1000.yaml", 4.0),
    ("hut-sipm-c.yaml", "hut-board-pt1000.yaml", 5.0),
)

SAFETY = (
    "caution: SiPM bias supplies deliver tens of volts (above 60 V dc is hazardous live under IEC 61010-1 in dry "
    "conditions); coolers can overheat an unsinked hot side or drive a cold plate below the dew point. These are "
    "models for planning; wiring, enclosures and field installation follow local codes and licensed practice."
)


def register(subparsers) -> None:
    parser = subparsers.add_parser("demo", help="run the main job on the bundled demo profiles")
    parser.add_argument("--profiles", default="hardware_profiles", metavar="DIR",
                        help="directory holding the demo profiles (default: hardware_profiles)")
    parser.add_argument("--step-c", type=float, default=10.0, metavar="K",
                        help="temperature step of the printed tables, kelvin (default 10)")
    add_json_flag(parser)
    parser.set_defaults(handler=run)


def instrument_model(sipm_profile, board_profile, overvoltage_v: float, temps_c) -> dict:
    """The demo instrument's model over temperature: uncompensated drift and the constant-overvoltage bias.

    The uncompensated bias is the one giving ``overvoltage_v`` at 25 C and held
    fixed; the compensated bias follows the breakdown voltage and adds back the
    series-resistor drop at the modelled dark current.
    """
    device = sipm_profile.device
    supply = board_profile.supply
    temps_c = np.asarray(temps_c, dtype=float)
    fixed_bias_v = float(device.breakdown.breakdown_v(25.0)) + overvoltage_v
    fixed = evaluate(device, temps_c, bias_v=fixed_bias_v)
    nominal_gain = float(gain(device, fixed_bias_v, 25.0))
    held = evaluate(device, temps_c, overvoltage_v=overvoltage_v)
    # Supply output that puts the wanted bias on the sensor despite the filter resistor.
    supply_v = held.bias_v + supply.drop_v(held.current_a)
    at_sensor_v = sipm_bias_v(supply, device, supply_v, temps_c)
    held_gain = gain(device, at_sensor_v, temps_c)
    return {
        "temp_c": temps_c,
        "breakdown_v": held.breakdown_v,
        "adc_code": board_profile.temperature.adc_code(temps_c),
        "fixed_bias_v": fixed_bias_v,
        "fixed_gain_error_pct": 100.0 * (fixed.gain / nominal_gain - 1.0),
        "compensated_supply_v": supply_v,
        "compensated_dac_code": supply.dac_code(supply_v),
        "series_drop_mv": 1e3 * supply.drop_v(held.current_a),
        "compensated_gain_error_pct": 100.0 * (held_gain / nominal_gain - 1.0),
        "dark_rate_khz": held.dark_rate_hz / 1e3,
    }


def run(args) -> int:
    root = Path(args.profiles)
    print(SAFETY, file=sys.stderr)
    lo_c, hi_c = -25.0, 45.0
    temps_c = np.arange(lo_c, hi_c + 1e-9, args.step_c)
    report = []
    for sipm_name, board_name, ov in DEMO_INSTRUMENTS:
        paths = [root / sipm_name, root / board_name]
        for p in paths:
            if not p.is_file():
                raise InputError(Problem(str(p), 0, "", "demo profile not found (run from the project's top folder "
                                                         "or pass --profiles DIR)"))
        sipm_profile, board_profile = load_sipm(paths[0]), load_board(paths[1])
        model = instrument_model(sipm_profile, board_profile, ov, temps_c)
        report.append({"sipm": sipm_profile.name, "board": board_profile.name, "overvoltage_v": ov, **model})
        if args.json:
            continue
        device = sipm_profile.device
        print(f"\n== {sipm_profile.name} on {board_profile.name}: Vbd {device.breakdown.breakdown_v_at_ref:g} V at "
              f"{device.breakdown.ref_temp_c:g} C, {device.breakdown.tempco_mv_per_k:g} mV/K, overvoltage {ov:g} V")
        print(format_table(
            list(zip(model["temp_c"], model["breakdown_v"], model["adc_code"].tolist(), model["fixed_gain_error_pct"],
                     model["compensated_supply_v"], model["compensated_dac_code"].tolist(), model["series_drop_mv"],
                     model["compensated_gain_error_pct"], model["dark_rate_khz"])),
            ["temp_c", "breakdown_v", "temp_adc_code", "fixed_bias_gain_%", "comp_supply_v", "comp_dac_code",
             "series_drop_mv", "comp_gain_%", "dark_khz"],
            [".1f", ".3f", "d", "+.2f", ".4f", "d", ".2f", "+.3f", ".1f"]))
        swing = np.ptp(model["fixed_gain_error_pct"])
        print(f"gain swing at fixed bias {model['fixed_bias_v']:.3f} V: {swing:.1f} % over {lo_c:g}..{hi_c:g} C; "
              f"with constant-overvoltage bias: {np.ptp(model['compensated_gain_error_pct']):.3f} %")
    if args.json:
        print_json({"scenario": "mountain-hut radiation monitors, enclosure -25 to +45 C", "instruments": report})
    return 0
