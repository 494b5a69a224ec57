"""The tune and identify commands end to end."""

from __future__ import annotations

import importlib.util
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


def test_tune_board_profile_bias_loop(cli, profiles_dir):
    r = cli("tune", "--plant", profiles_dir / "hut-board-pt1000.yaml", "--method", "amigo", "--json")
    assert r.status == 0, r.stderr
    out = json.loads(r.stdout)
    assert "IEC 61010-1" in r.stderr
    assert out["kp"] > 0 and out["rate_hz"] == 10.0  # direct topology: more code, more volts
    ntc = json.loads(cli("tune", "--plant", profiles_dir / "hut-board-ntc.yaml", "--method", "simc",
                         "--json").stdout)
    assert ntc["kp"] < 0  # feedback injection: more code, fewer volts


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
    (["--fopdt", 2, 30, 5, "--method", "simc", "--rate-hz", -1], "--rate-hz: must be positive"),
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
    assert r.status == 2 and "control.setpoint_temp_c" in r.stderr and "coldest reachable" in r.stderr


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
