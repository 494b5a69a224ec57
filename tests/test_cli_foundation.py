"""The foundation commands: profile check, model, sensor, demo; and the installed entry points."""

import json
import os
import subprocess
import sys

import pytest


def test_profile_check_bundled(cli, profiles_dir):
    files = sorted(profiles_dir.iterdir())  # includes README.md, which is skipped with a note
    result = cli("profile", "check", *files)
    assert result.status == 0, result.stderr
    assert result.stdout.count(": ok (") == len([f for f in files if f.suffix == ".yaml"])
    assert "README.md: skipped" in result.stderr


def test_profile_check_reports_each_problem_and_exits_2(cli, tmp_path, profiles_dir):
    bad = tmp_path / "bad.yaml"
    bad.write_text((profiles_dir / "hut-sipm-a.yaml").read_text()
                   .replace("capacitance_f: 160e-15", "capacitance_f: -1.0")
                   .replace("count: 18980", "count: 1.5"))
    empty = tmp_path / "empty.yaml"
    empty.write_text("")
    broken = tmp_path / "broken.yaml"
    broken.write_text("kind: sipm\nname: [x\n")
    result = cli("profile", "check", profiles_dir / "hut-sipm-b.yaml", bad, empty, broken)
    assert result.status == 2
    lines = result.stderr.strip().splitlines()
    assert any(line.startswith(f"compensator: {bad}:") and "cell.capacitance_f: must be greater than 0" in line for line in lines)
    assert any(line.startswith(f"compensator: {bad}:") and "cell.count: expected a whole number" in line for line in lines)
    assert any(line.startswith(f"compensator: {empty}:1: ") and "empty" in line for line in lines)
    assert any(line.startswith(f"compensator: {broken}:") and "YAML syntax error" in line for line in lines)
    assert "Traceback" not in result.stderr
    assert "hut-sipm-b.yaml: ok" in result.stdout


def test_profile_check_json(cli, profiles_dir, tmp_path):
    bad = tmp_path / "bad.yaml"
    bad.write_text("kind: board\n")
    result = cli("profile", "check", "--json", profiles_dir / "hut-cooler.yaml", bad)
    data = json.loads(result.stdout)
    assert result.status == 2 and data["invalid"] == 1 and data["profiles"][0]["status"] == "ok"
    assert {p["key"] for p in data["profiles"][1]["problems"]} >= {"name", "supply", "dac"}


def test_profile_check_nothing_to_check(cli, profiles_dir):
    assert cli("profile", "check", profiles_dir / "README.md").status == 2


def test_profile_keys_lists_units(cli):
    result = cli("profile", "keys", "--kind", "board")
    assert result.status == 0 and "`supply.series_resistor_ohm`" in result.stdout and "ohm" in result.stdout


def test_profile_readme_in_sync():
    sys.path.insert(0, str(os.path.join(os.path.dirname(__file__), "..", "tools")))
    try:
        import update_profile_docs
    finally:
        sys.path.pop(0)
    assert update_profile_docs.main(["--check"]) == 0


def test_model_fixed_overvoltage_json(cli, profiles_dir):
    result = cli("model", "--sipm", profiles_dir / "hut-sipm-a.yaml", "--temp-c", "-25", "25", "45",
                 "--overvoltage-v", "3", "--json")
    assert result.status == 0
    points = json.loads(result.stdout)["points"]
    assert [p["temp_c"] for p in points] == [-25.0, 25.0, 45.0]
    assert points[1]["breakdown_v"] == pytest.approx(24.5)
    assert points[1]["gain"] == pytest.approx(160e-15 * 3 / 1.602176634e-19)
    assert points[0]["fixed_bias_gain_change_pct_per_k"] == pytest.approx(-100 * 0.0215 / 3)
    assert points[2]["dark_rate_hz"] > points[0]["dark_rate_hz"]


def test_model_fixed_bias_table_and_warnings(cli, profiles_dir):
    result = cli("model", "--sipm", profiles_dir / "hut-sipm-a.yaml", "--temp-c", "0", "25", "--bias-v", "40")
    assert result.status == 0
    assert "breakdown_v" in result.stdout and "warning: overvoltage above" in result.stderr


def test_model_errors_are_one_line(cli, profiles_dir, tmp_path):
    result = cli("model", "--sipm", tmp_path / "none.yaml", "--temp-c", "25", "--bias-v", "27")
    assert result.status == 2 and result.stderr.count("\n") == 1 and "cannot read" in result.stderr
    result = cli("model", "--sipm", profiles_dir / "hut-board-ntc.yaml", "--temp-c", "25", "--bias-v", "27")
    assert result.status == 2 and "expected a 'sipm' profile" in result.stderr
    assert cli("model", "--sipm", profiles_dir / "hut-sipm-a.yaml", "--temp-c", "25").status == 2


def test_sensor_both_directions(cli, profiles_dir):
    board = profiles_dir / "hut-board-pt1000.yaml"
    forward = json.loads(cli("sensor", "--board", board, "--temp-c", "-25", "20", "45", "--json").stdout)["points"]
    codes = [p["adc_code"] for p in forward]
    back = json.loads(cli("sensor", "--board", board, "--adc-code", *codes, "--json").stdout)["points"]
    for f, b in zip(forward, back):
        assert b["temp_c"] == pytest.approx(f["temp_c"], abs=b["k_per_code"])
        assert b["status"] == "ok"
    rails = json.loads(cli("sensor", "--board", board, "--adc-code", "0", "65535", "--json").stdout)["points"]
    assert all(p["status"].startswith("invalid") and p["temp_c"] is None for p in rails)
    bad = cli("sensor", "--board", board, "--adc-code", "70000")
    assert bad.status == 2 and "outside the 16-bit ADC range" in bad.stderr


def test_demo_runs_the_chain_end_to_end(cli, profiles_dir, demo_run):
    result, out_dir = demo_run
    assert result.status == 0, result.stderr
    data = json.loads(result.stdout)
    assert "caution" in result.stderr and "IEC 61010-1" in result.stderr
    char = data["characterisation"]
    # The synthetic bench curves come from the profile's breakdown model: the fit must recover it.
    assert abs(char["breakdown_v_at_ref"] - char["true_breakdown_v_at_ref"]) < 0.02
    assert abs(char["tempco_mv_per_k"] / char["true_tempco_mv_per_k"] - 1) < 0.02
    assert [i["sipm"] for i in data["instruments"]] == ["hut-sipm-a", "hut-sipm-b", "hut-sipm-c"]
    for inst in data["instruments"]:
        drift = inst["drift"]
        # Uncompensated, the gain swings by tens of percent over -25..45 C; the law removes it, and the
        # firmware's integer path stays within the table's bound plus half an ADC code.
        assert max(drift["fixed_gain_error_pct"]) - min(drift["fixed_gain_error_pct"]) > 30
        assert max(abs(x) for x in drift["law_gain_error_pct"]) < 0.01
        assert max(abs(x) for x in drift["firmware_gain_error_pct"]) < 0.1
        # The headline figures cover every ADC code of the range, so they bound the printed rows.
        assert drift["firmware_gain_error_max_abs_pct"] >= max(abs(x) for x in drift["firmware_gain_error_pct"])
        assert drift["firmware_gain_error_max_abs_pct"] < 0.1 and drift["codes_evaluated"] > 2000
        assert inst["table"]["max_gain_error_pct"] <= inst["table"]["bound_pct"]
        # The smallest layout is kept: at most half the smallest uniform table on every bundled pair at 0.05 %.
        assert 2 * inst["table"]["table_bytes"] <= inst["table"]["uniform_table_bytes"]
        assert inst["budget"]["calibrated_rss_pct"] < inst["budget"]["rss_pct"]
        assert len(inst["table"]["files"]) == 3
    # hut-sipm-a: linear breakdown (21.5 mV/K), constant cell capacitance, 3 V: at fixed bias the gain moves by
    # exactly tempco * dT / Vov, so over 70 K the swing is 21.5e-3 * 70 / 3 = 50.17 % (first-order physics,
    # G = C (V - Vbd) / q); the codes at the ends of the range reach a little past -25 and 45 C.
    assert data["instruments"][0]["drift"]["fixed_gain_error_ptp_pct"] == pytest.approx(50.17, abs=0.1)
    # Under light, the drop corrected from the measured current holds the gain; from the dark model it does not.
    light = data["instruments"][0]["light"]
    assert [r["photon_rate_hz"] for r in light] == [0, 1e6, 1e7, 1e8]
    assert light[-1]["modelled_max_gain_error_pct"] > 1 and light[-1]["measured_max_gain_error_pct"] < 0.1
    assert data["instruments"][1]["light"] is None  # that board has no current sense
    loops = {lp["loop"]: lp for lp in data["loops"]}
    assert set(loops) == {"cooler", "bias supply"}
    for lp in loops.values():
        # Robust tuning holds Ms at 1.4 (Astrom and Hagglund's robustness measure, evaluated with python-control).
        assert lp["stable"] and lp["ms"] <= 1.4 * 1.001 and lp["gain_margin"] > 2
    assert loops["cooler"]["kp"] < 0  # more current cools
    # The simulated week (7 days at 0.5 Hz) on the bundled scenario: the table holds the gain far better than a
    # fixed bias, and the week's figures and report were written.
    week = data["simulation"]
    assert week["ticks"] == 7 * 86400 // 2 and week["comparison"]["uncompensated_over_compensated"] > 20
    assert sorted(p.name for p in (out_dir / "simulation").iterdir()) == [
        "report.html", "sim-bias.png", "sim-gain.png", "sim-temperatures.png", "sim-yield.png"]
    # A second run never overwrites what the first wrote, and says so before its long work (no caution printed).
    before = {p: p.stat().st_mtime_ns for p in out_dir.rglob("*")}
    again = cli("demo", "--profiles", profiles_dir, "--out", out_dir)
    # 9 table files and the simulated week's 4 figures and report
    assert again.status == 2 and again.stderr.count("already exists") == 9 + 5 and "caution" not in again.stderr
    assert {p: p.stat().st_mtime_ns for p in out_dir.rglob("*")} == before
    # Forced, with another print step and a shorter simulated stretch (0.25 days: 10800 ticks at 0.5 Hz).
    forced = cli("demo", "--profiles", profiles_dir, "--out", out_dir, "--force", "--step-c", "35", "--days", "0.25")
    assert forced.status == 0 and forced.stdout.count("wrote ") == 9 + 5
    assert "0.25 days, tick 2 s" in forced.stdout
    # The headline figures do not depend on the print step: the text at 35 K gives the JSON's at 10 K.
    lines = [x for x in forced.stdout.splitlines() if x.startswith("gain error against 25 C")]
    assert "at fixed bias 27.500 V 50.2 % peak-to-peak" in lines[0] and "2393 ADC codes" in lines[0]
    for line, inst in zip(lines, data["instruments"], strict=True):
        d = inst["drift"]
        assert (f"through the firmware's integer path {d['firmware_gain_error_ptp_pct']:.3f} % peak-to-peak "
                f"(largest absolute {d['firmware_gain_error_max_abs_pct']:.3f} %)") in line
        assert f"with the law {d['law_gain_error_ptp_pct']:.3f} % peak-to-peak" in line


def test_demo_missing_profiles(cli, tmp_path):
    result = cli("demo", "--profiles", tmp_path)
    assert result.status == 2 and "demo profile not found" in result.stderr


def test_entry_points_run_as_real_processes(profiles_dir):
    env = dict(os.environ)
    for argv in ([sys.executable, "-m", "compensator", "--version"],
                 [sys.executable, "-m", "compensator", "profile", "check", str(profiles_dir / "nothing.yaml")]):
        proc = subprocess.run(argv, capture_output=True, text=True, env=env, timeout=120)
        assert "Traceback" not in proc.stderr
    assert proc.returncode == 2 and proc.stderr.strip().endswith("cannot read file: No such file or directory")


def test_light_commands_do_not_import_the_heavy_libraries(profiles_dir):
    # Commands are registered in full only when they run, so `profile check` never pays for
    # python-control or scipy.signal at start-up.
    code = ("import sys; from compensator.cli import main; "
            f"status = main(['profile', 'check', {str(profiles_dir / 'hut-sipm-a.yaml')!r}]); "
            "print(status, 'control' in sys.modules, 'scipy.signal' in sys.modules)")
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert proc.stdout.split()[-3:] == ["0", "False", "False"], proc.stderr


def test_placeholders_list_every_command_with_its_full_help():
    from compensator.cli import build_parser

    def helps(parser):
        action = next(a for a in parser._actions if a.__class__.__name__ == "_SubParsersAction")
        return {c.dest: c.help for c in action._choices_actions}

    full, lazy = helps(build_parser()), helps(build_parser(only=""))
    assert full == lazy and {"demo", "profile", "calibrate", "budget", "table", "tune", "identify"} <= set(full)


def _cvd_ohm(t_c, r0_ohm):
    # Callendar-Van Dusen with the IEC 60751 (ITS-90) coefficients, written out here independently of the library.
    a, b, c = 3.9083e-3, -5.775e-7, (-4.183e-12 if t_c < 0 else 0.0)
    return r0_ohm * (1 + a * t_c + b * t_c**2 + c * (t_c - 100) * t_c**3)


def test_sensor_follows_iec_60751(cli, profiles_dir):
    # IEC 60751 table: a Pt100 reads 138.5055 ohm at 100 C and 109.7347 ohm at 25 C; the board's Pt1000 reads ten
    # times that. The command's code for a temperature must sit within one code of the published resistance, and
    # the temperature it reads back from a code must be the IEC 60751 inverse of that code's resistance.
    board = profiles_dir / "hut-board-pt1000.yaml"
    result = cli("sensor", "--board", board, "--temp-c", "100", "25", "-25", "--json")
    assert result.status == 0, result.stderr
    points = json.loads(result.stdout)["points"]
    for point, published_ohm in zip(points, (1385.055, 1097.347, _cvd_ohm(-25.0, 1000.0))):
        ohm_per_code = 3.9 * point["k_per_code"]  # dR/dT of a Pt1000 is 3.8 to 3.9 ohm/K over -25..100 C
        assert abs(point["resistance_ohm"] - published_ohm) < ohm_per_code
        assert _cvd_ohm(point["read_temp_c"], 1000.0) == pytest.approx(point["resistance_ohm"], rel=1e-9)
    assert points[0]["status"] == "outside operating range" and points[1]["status"] == "ok"
    assert points[1]["sensor_tolerance_k"] == pytest.approx(0.15 + 0.002 * 25)  # IEC 60751 class A
    text = cli("sensor", "--board", board, "--temp-c", "25").stdout
    assert "platinum RTD, R0 1000 ohm" in text and "Sensor" not in text and "1097.3" in text


def test_sensor_rejects_codes_beyond_the_adc_in_one_line(cli, profiles_dir):
    for code in ("99999999999999999999999", "-1", "1.5"):
        result = cli("sensor", "--board", profiles_dir / "hut-board-ntc.yaml", "--adc-code", code)
        assert result.status == 2 and result.stderr.count("\n") == 1 and "--adc-code" in result.stderr
    result = cli("sensor", "--board", profiles_dir / "hut-board-ntc.yaml", "--adc-code", "4096")
    assert result.status == 2 and "outside the 12-bit ADC range 0..4095" in result.stderr


def test_demo_files_are_listed():
    # The xdist scheduler of tests/conftest.py keeps these files on one worker so that the demo runs once per suite.
    import ast
    from pathlib import Path

    root = Path(__file__).resolve().parent
    demo_files = next(ast.literal_eval(node.value) for node in ast.parse((root / "conftest.py").read_text()).body
                      if isinstance(node, ast.Assign) and node.targets[0].id == "DEMO_FILES")
    users = set()
    for path in root.glob("test_*.py"):
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.arg) and node.arg == "demo_run":
                users.add(f"tests/{path.name}")
    assert users == set(demo_files) == {"tests/test_cli_foundation.py", "tests/test_vocabulary_commands.py"}
