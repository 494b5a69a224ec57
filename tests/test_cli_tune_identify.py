"""The tune and identify commands end to end."""

from __future__ import annotations

import importlib.util
import math
import json
import shutil
import subprocess
from pathlib import Path

import pytest

TOOLS = Path(__file__).resolve().parent.parent / "tools" / "make_loop_data.py"


@pytest.fixture(scope="module")
def loopdata():
    """tools/make_loop_data.py as a module."""
    spec = importlib.util.spec_from_file_location("make_loop_data", TOOLS)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@pytest.fixture(scope="module")
def demo_csv(tmp_path_factory, loopdata):
    module = loopdata
    d = tmp_path_factory.mktemp("loopdata")
    truths = {}
    for name, maker in (("step", module.make_step), ("relay", module.make_relay), ("fopdt", module.make_fopdt_step)):
        *_, truths[name] = maker(d / f"{name}.csv")
    return d, truths


def test_tune_fopdt_simc_json_contract(cli):
    r = cli("tune", "--fopdt", 2, 30, 5, "--method", "simc", "--rate-hz", 10, "--json")
    assert r.status == 0, r.stderr
    out = json.loads(r.stdout)
    theta = 5 + 1.5 * 0.1  # the model's dead time plus the hold and computation delay
    assert out["kp"] == pytest.approx(30 / (2 * 2 * theta))  # Skogestad 2003 with tau_c = theta
    assert out["ki_per_s"] == pytest.approx(out["kp"] / min(30, 8 * theta))
    assert out["kd_s"] == 0
    assert (out["kp_unit"], out["ki_unit"]) == ("input unit/output unit", "input unit/(output unit s)")
    assert set(out["margins"]) >= {"gain_margin", "phase_margin_deg", "ms", "crossover_rad_s"}
    assert set(out["step"]) >= {"rise_time_s", "settling_time_s", "overshoot_pct"}
    assert out["stable"] and out["margins"]["ms"] < 1.6
    r2 = cli("tune", "--fopdt", 2, 30, 5, "--method", "simc", "--rate-hz", 10, "--tau-c", 10, "--json",
             "--ignore-sampling-delay")
    assert json.loads(r2.stdout)["kp"] == pytest.approx(30 / (2 * 15))


def test_tune_cooler_profile_with_caution_plot_and_c(cli, profiles_dir, tmp_path):
    r = cli("tune", "--plant", profiles_dir / "hut-cooler.yaml", "--method", "robust", "--json",
            "--plot", tmp_path, "--emit-c", tmp_path)
    assert r.status == 0, r.stderr
    out = json.loads(r.stdout)
    assert out["kp"] < 0 and out["ki_per_s"] < 0  # more current cools
    assert (out["kp_unit"], out["ki_unit"], out["kd_unit"]) == ("A/K", "A/(K s)", "A s/K")
    assert out["margins"]["ms"] <= 1.4 * 1.001
    assert "dew point" in r.stderr and "heat sink" in r.stderr and "licensed practice" in r.stderr
    op = out["plant"]["operating_point"]
    assert op["cold_temp_c"] == pytest.approx(20.0) and op["current_a"] < op["optimum_current_a"]
    for name in ("cooler-robust-bode.png", "cooler-robust-sensitivity.png", "cooler-robust-step.png"):
        assert (tmp_path / name).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    header = (tmp_path / "cooler_pid.h").read_text()
    assert "hut-cooler" in header and "robust" in header
    if shutil.which("cc") is None:
        pytest.skip("no C compiler (cc) to compile the emitted PID")
    done = subprocess.run(["cc", "-std=c99", "-Wall", "-Wextra", "-Werror", "-c", str(tmp_path / "cooler_pid.c"),
                           "-o", str(tmp_path / "cooler_pid.o")], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    # Existing files are refused without --force and left alone.
    before = header
    again = cli("tune", "--plant", profiles_dir / "hut-cooler.yaml", "--method", "simc", "--emit-c", tmp_path)
    assert again.status == 2 and "already exists" in again.stderr
    assert (tmp_path / "cooler_pid.h").read_text() == before


def test_tune_board_profile_bias_loop(cli, profiles_dir, tmp_path):
    # The Pt1000 board has no bias read-back: its bias is set open-loop and there is no loop to tune.
    r = cli("tune", "--plant", profiles_dir / "hut-board-pt1000.yaml", "--method", "amigo", "--json")
    assert r.status == 2 and "bias_readback" in r.stderr and "open-loop" in r.stderr and r.stdout == ""
    r = cli("tune", "--plant", profiles_dir / "hut-board-ntc.yaml", "--method", "simc", "--json")
    assert r.status == 0, r.stderr
    ntc = json.loads(r.stdout)
    assert "IEC 61010-1" in r.stderr
    assert ntc["kp"] < 0 and ntc["rate_hz"] == 10.0  # feedback injection: more code, fewer volts
    assert (ntc["kp_unit"], ntc["ki_unit"]) == ("DAC code/V", "DAC code/(V s)")
    # The direct topology of the Pt1000 board, given a read-back channel: more code, more volts.
    text = (profiles_dir / "hut-board-pt1000.yaml").read_text() + (
        "bias_readback:\n  adc_bits: 12\n  reference_v: 2.5\n  divider_ratio_v_per_v: 0.03\n")
    path = tmp_path / "pt1000-readback.yaml"
    path.write_text(text)
    r = cli("tune", "--plant", path, "--method", "amigo", "--json")
    assert r.status == 0, r.stderr
    assert json.loads(r.stdout)["kp"] > 0


def test_tune_human_output_and_pid(cli):
    r = cli("tune", "--sopdt", 1.5, 20, 4, 1, "--method", "simc", "--pid", "--rate-hz", 20)
    assert r.status == 0, r.stderr
    assert "PID by simc" in r.stdout and "margins:" in r.stdout


def test_tune_unstable_loop_exits_1(cli):
    r = cli("tune", "--fopdt", 1, 1, 0.05, "--method", "zn", "--pid", "--rate-hz", 2, "--ignore-sampling-delay",
            "--json")
    assert r.status == 1
    assert json.loads(r.stdout)["stable"] is False and "UNSTABLE" in r.stderr


def test_tune_reversed_cooler_gain_is_warned(cli, profiles_dir, tmp_path):
    text = (profiles_dir / "hut-cooler.yaml").read_text().replace("max_current_a: 3.0", "max_current_a: 12.0")
    path = tmp_path / "big-cooler.yaml"
    path.write_text(text)
    r = cli("tune", "--plant", path, "--method", "simc", "--current-a", 5.0, "--json")
    assert "REVERSES SIGN" in r.stderr
    assert json.loads(r.stdout)["plant"]["dc_gain"] > 0


@pytest.mark.parametrize("argv, needle", [
    (["--fopdt", 0, 30, 5, "--method", "simc", "--rate-hz", 10], "--fopdt: gain must be nonzero"),
    (["--fopdt", 2, 30, 5, "--method", "simc"], "--rate-hz: required"),
    (["--fopdt", 2, 30, 5, "--method", "simc", "--pid", "--rate-hz", 10], "second-order"),
    (["--fopdt", 2, 30, 5, "--method", "robust", "--ms", 0.9, "--rate-hz", 10], "--ms: must exceed 1"),
    (["--fopdt", 2, 30, 5, "--method", "simc", "--rate-hz", -1], "--rate-hz: must be greater than 0"),
    (["--fopdt", 2, 30, 5, "--method", "simc", "--rate-hz", 10, "--emit-c", "."], "--input-per-count: required"),
])
def test_tune_bad_arguments(cli, argv, needle):
    r = cli("tune", *argv)
    assert r.status == 2
    assert needle in r.stderr and "Traceback" not in r.stderr


def test_tune_bad_profiles(cli, profiles_dir, tmp_path):
    r = cli("tune", "--plant", profiles_dir / "hut-sipm-a.yaml", "--method", "simc")
    assert r.status == 2 and "thermal or board profile" in r.stderr
    r = cli("tune", "--plant", profiles_dir / "hut-cooler.yaml", "--method", "simc", "--setpoint-temp-c", -60)
    # The setpoint came from the command line, so the message names the option (the real cause).
    assert r.status == 2 and "--setpoint-temp-c" in r.stderr and "coldest reachable -9.64 C" in r.stderr
    cold = tmp_path / "cold.yaml"
    cold.write_text((profiles_dir / "hut-cooler.yaml").read_text().replace("setpoint_temp_c: 20.0",
                                                                         "setpoint_temp_c: -60.0"))
    r = cli("tune", "--plant", cold, "--method", "simc")
    assert r.status == 2 and f"{cold}: control.setpoint_temp_c: setpoint -60 C" in r.stderr


def test_identify_fopdt_json_and_plot(cli, demo_csv, tmp_path):
    d, truth = demo_csv
    r = cli("identify", d / "fopdt.csv", "--json", "--plot", tmp_path)
    assert r.status == 0, r.stderr
    out = json.loads(r.stdout)
    t = truth["fopdt"]
    assert out["process_gain"] == pytest.approx(t["gain"], rel=0.005)
    assert out["time_constant_s"] == pytest.approx(t["time_constant_s"], rel=0.005)
    assert out["dead_time_s"] == pytest.approx(t["dead_time_s"], abs=0.05)
    assert out["tune_args"][0] == "--fopdt"
    assert (tmp_path / "fopdt-fit.png").stat().st_size > 1000


def test_identify_cooler_step_then_tune(cli, demo_csv):
    d, truth = demo_csv
    r = cli("identify", d / "step.csv", "--model", "sopdt", "--json")
    assert r.status == 0, r.stderr
    out = json.loads(r.stdout)
    assert out["process_gain"] == pytest.approx(truth["step"]["gain_k_per_a"], rel=0.02)
    assert out["time_constant2_s"] > 0
    tuned = cli("tune", *out["tune_args"], "--method", "simc", "--pid", "--rate-hz", 10, "--json")
    assert tuned.status == 0, tuned.stderr
    human = cli("identify", d / "step.csv")
    assert "Smith start" in human.stdout and "next: compensator tune --fopdt" in human.stdout


def test_identify_relay(cli, demo_csv, tmp_path):
    d, truth = demo_csv
    r = cli("identify", d / "relay.csv", "--model", "relay", "--json", "--plot", tmp_path)
    assert r.status == 0, r.stderr
    out = json.loads(r.stdout)
    assert out["ultimate_gain"] == pytest.approx(truth["relay"]["ultimate_gain"], rel=0.15)
    assert out["ultimate_period_s"] == pytest.approx(truth["relay"]["ultimate_period_s"], rel=0.10)
    assert (tmp_path / "relay-relay.png").exists()


def test_identify_bad_files(cli, tmp_path, demo_csv):
    bad = tmp_path / "bad.csv"
    bad.write_text("time_s,input,output\n" + "".join(f"{i},0,0\n" for i in range(12)) + "12,0,oops\n")
    r = cli("identify", bad)
    assert r.status == 2
    assert f"{bad}:14: output: not a number" in r.stderr and "Traceback" not in r.stderr
    d, _ = demo_csv
    r = cli("identify", d / "fopdt.csv", "--model", "relay")
    assert r.status == 2 and "whole relay cycles" in r.stderr
    flat = tmp_path / "flat.csv"
    flat.write_text("time_s,input,output\n" + "".join(f"{i},1,{i}\n" for i in range(20)))
    r = cli("identify", flat)
    assert r.status == 2 and "not a step test" in r.stderr


def test_tune_robust_over_the_field_ambient_range(cli, profiles_dir):
    r = cli("tune", "--plant", profiles_dir / "hut-cooler.yaml", "--method", "robust", "--ambient-range", -25, 45,
            "--json")
    assert r.status == 0, r.stderr
    out = json.loads(r.stdout)
    checks = out["ambient_check"]
    assert [c["ambient_temp_c"] for c in checks] == [-25, -7.5, 10, 25, 27.5, 45]
    assert all(c["reachable"] and c["stable"] and c["ms"] <= 1.4 * 1.001 for c in checks)
    assert checks[0]["current_a"] < 0 < checks[-1]["current_a"]  # heats in winter, cools in summer
    assert max(c["ms"] for c in checks) == pytest.approx(1.4, abs=0.01)  # the worst ambient is on the bound
    r = cli("tune", "--plant", profiles_dir / "hut-board-ntc.yaml", "--method", "simc", "--ambient-range", 0, 10)
    assert r.status == 2 and "--ambient-range: applies to a thermal profile only" in r.stderr


def test_make_loop_data_creates_its_folder_and_never_overwrites(loopdata, tmp_path, capsys):
    target = tmp_path / "new" / "loops"
    assert loopdata.main([str(target)]) == 0
    assert sorted(p.name for p in target.iterdir()) == ["fopdt-step.csv", "hut-cooler-relay.csv", "hut-cooler-step.csv"]
    before = (target / "hut-cooler-step.csv").read_bytes()
    assert loopdata.main([str(target)]) == 2
    assert "already exists" in capsys.readouterr().err
    assert loopdata.main([str(target), "--force"]) == 0
    assert (target / "hut-cooler-step.csv").read_bytes() == before  # seeded: the same bytes again


def test_tune_ambient_range_reports_dew_point_and_hot_side_per_ambient(cli, profiles_dir):
    from compensator.physics.thermal import dew_point_c

    r = cli("tune", "--plant", profiles_dir / "hut-cooler.yaml", "--method", "robust", "--ambient-range", -25, 45,
            "--relative-humidity-pct", 30, "--json")
    assert r.status == 0, r.stderr
    out = json.loads(r.stdout)
    for c in out["ambient_check"]:
        # Magnus formula, Alduchov and Eskridge (1996): a = 17.625, b = 243.04 C, computed here independently.
        g = math.log(0.30) + 17.625 * c["ambient_temp_c"] / (243.04 + c["ambient_temp_c"])
        assert c["dew_point_c"] == pytest.approx(243.04 * g / (17.625 - g), abs=1e-9)
        assert c["condensation"] == (20.0 < c["dew_point_c"] + 3.0)
        if c["current_a"] > 0:  # cooling: the hot side carries the pumped heat plus the electrical power
            assert c["hot_temp_c"] > c["ambient_temp_c"]
    hot = out["ambient_check"][-1]
    assert hot["ambient_temp_c"] == 45 and hot["dew_point_c"] == pytest.approx(23.43, abs=0.01) and hot["condensation"]
    assert out["worst_ms"] == pytest.approx(max(c["ms"] for c in out["ambient_check"])) and out["worst_ms"] <= 1.4007
    assert any(f["code"] == "condensation_risk" and f["severity"] == "danger" for f in out["findings"])
    assert "CONDENSATION RISK: at ambient 45 C and 30 % RH" in r.stderr
    assert float(dew_point_c(45.0, 50.0)) == pytest.approx(32.2, abs=0.05)  # the 45 C / 50 % case


def test_tune_verify_checks_a_builders_gains_against_python_control(cli):
    import control
    import numpy as np

    # kp + ki T z^-1 / (1 - z^-1) on a ZOH-sampled FOPDT with 5 + 1 samples of delay, built with python-control only.
    T, kp, ki = 0.1, 1.2, 0.06
    c = control.tf([kp, ki * T - kp], [1, -1], T)
    p = control.sample_system(control.tf([2.0], [30.0, 1]), T, "zoh") * control.tf([1], [1, 0, 0, 0, 0, 0, 0], T)
    w = np.linspace(1e-4, np.pi / T * 0.9999, 200000)
    z = np.exp(1j * w * T)
    ms = 1.0 / np.min(np.abs(1 + c(z) * p(z)))
    r = cli("tune", "--fopdt", 2, 30, 0.5, "--rate-hz", 10, "--verify", "--kp", kp, "--ki", ki, "--json")
    assert r.status == 0, r.stderr
    out = json.loads(r.stdout)
    assert out["method"] == "verify" and (out["kp"], out["ki_per_s"]) == (kp, ki)
    assert out["margins"]["ms"] == pytest.approx(ms, rel=1e-4)
    # Gains that destabilise the loop exit 1 and say so.
    bad = cli("tune", "--fopdt", 2, 30, 0.5, "--rate-hz", 10, "--verify", "--kp", 40, "--ki", 1, "--json")
    assert bad.status == 1 and json.loads(bad.stdout)["stable"] is False and "UNSTABLE" in bad.stderr


def test_tune_verify_over_the_ambient_range(cli, profiles_dir):
    tuned = json.loads(cli("tune", "--plant", profiles_dir / "hut-cooler.yaml", "--method", "robust",
                           "--ambient-range", -25, 45, "--json").stdout)
    again = cli("tune", "--plant", profiles_dir / "hut-cooler.yaml", "--verify", "--kp", tuned["kp"], "--ki",
                tuned["ki_per_s"], "--ambient-range", -25, 45, "--json")
    assert again.status == 0, again.stderr
    out = json.loads(again.stdout)
    assert [c["ms"] for c in out["ambient_check"]] == pytest.approx([c["ms"] for c in tuned["ambient_check"]],
                                                                    rel=1e-6)


def test_tune_from_the_ultimate_point(cli):
    ku, pu = -2.6, 7.0
    r = cli("tune", "--ultimate", ku, pu, "--method", "zn-cycle", "--rate-hz", 10, "--json")
    assert r.status == 0, r.stderr
    out = json.loads(r.stdout)
    # Ziegler and Nichols (1942) ultimate-cycle PI: 0.45 Ku, Ti = Pu / 1.2.
    assert (out["kp"], out["ki_per_s"]) == pytest.approx((0.45 * ku, 0.45 * ku / (pu / 1.2)))
    assert out["verified"] is False and "NOT verified" in r.stderr
    rob = json.loads(cli("tune", "--ultimate", ku, pu, "--method", "robust", "--rate-hz", 10, "--json").stdout)
    # The loop at the ultimate frequency, L = C(j wu) G(j wu) with G(j wu) = -1/Ku, lies on |1 + L| = 1/Ms.
    wu = 2 * math.pi / pu
    loop = -(rob["kp"] + rob["ki_per_s"] / (1j * wu)) / ku
    assert abs(1 + loop) == pytest.approx(1 / 1.4, rel=1e-9)
    model = cli("tune", "--ultimate", ku, pu, "--static-gain", -4.2, "--method", "robust", "--rate-hz", 10, "--json")
    assert model.status == 0 and json.loads(model.stdout)["margins"]["ms"] <= 1.4 * 1.001


def test_tune_long_dead_time_at_a_high_rate_is_bounded(cli):
    r = cli("tune", "--fopdt", 2, 300, 60, "--rate-hz", 100, "--method", "simc", "--json")
    assert r.status == 0, r.stderr
    out = json.loads(r.stdout)
    theta = 60 + 1.5 * 0.01
    assert out["kp"] == pytest.approx(300 / (2 * 2 * theta))  # Skogestad 2003, tau_c = theta
    assert out["analysis_period_s"] > 0.01 and any(f["code"] == "delay_approximated" for f in out["findings"])
    assert out["stable"] and 1.3 < out["margins"]["ms"] < 1.8


@pytest.mark.parametrize("argv, needle", [
    (["--plant", "COOLER", "--method", "simc", "--setpoint-temp-c", "nan"], "--setpoint-temp-c: must be a finite number"),
    (["--plant", "COOLER", "--method", "simc", "--ambient-temp-c", "nan"], "--ambient-temp-c: must be a finite number"),
    (["--plant", "COOLER", "--method", "simc", "--ambient-range", "nan", 45], "--ambient-range: must be a finite number"),
    (["--plant", "COOLER", "--method", "simc", "--current-a", "nan"], "--current-a: must be a finite number"),
    (["--plant", "COOLER", "--method", "simc", "--relative-humidity-pct", 0], "must be greater than 0 %, got '0'"),
    (["--fopdt", 2, 30, 5, "--method", "robust", "--ms", 1e9, "--rate-hz", 10], "--ms: must exceed 1 and be at most 10"),
    (["--fopdt", 2, 30, 5, "--method", "simc", "--rate-hz", 10, "--name", "x"], "--name: applies with --emit-c only"),
    (["--fopdt", 2, 30, 5, "--method", "simc", "--rate-hz", 10, "--ambient-temp-c", 5],
     "--ambient-temp-c: applies to a thermal profile only"),
    (["--fopdt", 2, 30, 5, "--method", "simc", "--rate-hz", 10, "--ms", 1.5], "--ms: applies to --method robust"),
    (["--fopdt", 2, 30, 5, "--rate-hz", 10, "--verify", "--kp", 1], "--verify: needs --kp and --ki"),
    (["--fopdt", 2, 30, 5, "--rate-hz", 10, "--method", "simc", "--kp", 1], "--kp: applies with --verify only"),
    (["--ultimate", 0, 7, "--method", "zn-cycle", "--rate-hz", 10], "ultimate gain must be nonzero"),
])
def test_tune_refuses_nonsense_with_one_line(cli, profiles_dir, argv, needle):
    argv = [profiles_dir / "hut-cooler.yaml" if a == "COOLER" else a for a in argv]
    r = cli("tune", *argv)
    assert r.status == 2, r.stderr
    assert needle in r.stderr and "Traceback" not in r.stderr and "caution" not in r.stderr


def test_tune_refuses_an_empty_output_range_and_writes_nothing(cli, profiles_dir, tmp_path):
    r = cli("tune", "--plant", profiles_dir / "hut-cooler.yaml", "--method", "simc", "--emit-c", tmp_path,
            "--output-per-count", 1e12)
    assert r.status == 2 and "--output-per-count" in r.stderr and "fewer than two whole output counts" in r.stderr
    assert list(tmp_path.iterdir()) == []


def test_identify_relay_prints_the_next_tune_command(cli, demo_csv):
    d, truth = demo_csv
    r = cli("identify", d / "relay.csv", "--model", "relay", "--json")
    out = json.loads(r.stdout)
    assert out["process_sign"] == -1 and out["signed_ultimate_gain"] == pytest.approx(-out["ultimate_gain"])
    assert out["tune_args"][:2] == ["--ultimate", f"{out['signed_ultimate_gain']:.6g}"]
    assert 0 <= out["describing_function_error_pct"] < 2.5
    human = cli("identify", d / "relay.csv", "--model", "relay")
    assert "next: compensator tune --ultimate -" in human.stdout and "describing function" in human.stdout
    tuned = cli("tune", *out["tune_args"], "--method", "zn-cycle", "--rate-hz", 10, "--json")
    assert json.loads(tuned.stdout)["kp"] == pytest.approx(0.45 * out["signed_ultimate_gain"], rel=1e-5)


def test_identify_survives_huge_values(cli, tmp_path):
    path = tmp_path / "huge.csv"
    rows = [f"{0.1 * i!r},{1e16 if i >= 100 else 0.0!r},{-math.expm1(-max(0.1 * i - 12, 0) / 30)!r}"
            for i in range(3000)]
    path.write_text("time_s,input,output\n" + "\n".join(rows) + "\n")
    r = cli("identify", path, "--json")
    assert r.status == 0, r.stderr
    out = json.loads(r.stdout)
    assert out["process_gain"] == pytest.approx(1e-16, rel=1e-6) and out["time_constant_s"] == pytest.approx(30, rel=1e-4)
