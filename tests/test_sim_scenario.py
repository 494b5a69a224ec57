"""Scenario files: checked like profiles, errors located; `compensator simulate` on the command line."""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest

from compensator.errors import InputError, ProfileError
from compensator.profiles import load_scenario

SCENARIO = """\
kind: scenario
name: small
hardware:
  sipm: {sipm}
  board: {board}
  overvoltage_v: 3.0
run:
  duration_days: 0.05
  control_rate_hz: 0.2
thermal_path:
  enclosure_time_constant_s: 1800
  die_time_constant_s: 300
ambient:
  mean_temp_c: 5.0
  diurnal_amplitude_k: 10.0
{extra}"""


def write(tmp_path, profiles_dir, extra="", sipm="hut-sipm-a.yaml", board="hut-board-ntc.yaml", name="s.yaml"):
    path = tmp_path / name
    path.write_text(SCENARIO.format(sipm=profiles_dir / sipm, board=profiles_dir / board, extra=extra))
    return path


def line_of(path: Path, text: str) -> int:
    return next(i for i, ln in enumerate(path.read_text().splitlines(), 1) if text in ln)


def test_bundled_scenario_passes_profile_check(cli, profiles_dir):
    res = cli("profile", "check", profiles_dir / "hut-week-scenario.yaml", "--json")
    assert res.status == 0, res.stderr
    doc = json.loads(res.stdout)
    assert doc["profiles"][0]["kind"] == "scenario" and doc["profiles"][0]["name"] == "hut-week"
    assert doc["checked"] == 1 and doc["invalid"] == 0


def test_scenario_resolves_profiles_relative_to_its_folder(profiles_dir):
    sc = load_scenario(profiles_dir / "hut-week-scenario.yaml")
    assert sc.sipm.name == "hut-sipm-a" and sc.board.name == "hut-board-ntc" and sc.thermal.name == "hut-cooler"
    assert sc.strategies == ("uncompensated", "compensated", "compensated_cooled", "gain_trimmed")
    assert sc.section("hardware")["overvoltage_v"] == 3.0


@pytest.mark.parametrize("mutation, key, reason", [
    (lambda p, d: p.replace(str(d / "hut-sipm-a.yaml"), str(d / "no-such.yaml")), "hardware.sipm",
     "no such sipm profile"),
    (lambda p, d: p.replace(str(d / "hut-sipm-a.yaml"), str(d / "hut-board-ntc.yaml")), "hardware.sipm",
     "is not a sipm profile"),
    (lambda p, d: p.replace("duration_days: 0.05", "duration_days: 400"), "run.duration_days", "at most 366"),
    (lambda p, d: p.replace("duration_days: 0.05", "duration_days: .nan"), "run.duration_days", "expected a number"),
    (lambda p, d: p.replace("control_rate_hz: 0.2", "control_rate_hz: 0.00001"), "run.duration_days",
     "at least two control ticks"),
    (lambda p, d: p.replace("overvoltage_v: 3.0", "overvoltage_v: 9.0"), "hardware.overvoltage_v", "outside"),
    (lambda p, d: p + "strategies:\n  compensated_cooled: true\n", "strategies.compensated_cooled",
     "needs hardware.thermal"),
    (lambda p, d: p + "ambient_typo: 3\n", "ambient_typo", "unknown key"),
])
def test_scenario_errors_name_file_line_key_and_reason(tmp_path, profiles_dir, cli, mutation, key, reason):
    path = write(tmp_path, profiles_dir)
    path.write_text(mutation(path.read_text(), profiles_dir))
    with pytest.raises(ProfileError) as err:
        load_scenario(path)
    problem = err.value.problems[0]
    assert problem.key == key and reason in problem.reason and problem.file == str(path)
    assert problem.line == line_of(path, key.split(".")[-1] + ":") or key == "run.duration_days"
    res = cli("simulate", path)
    assert res.status == 2
    assert res.stderr.strip().splitlines()[0].startswith(f"compensator: {path}:")
    assert "Traceback" not in res.stderr and res.stdout == ""


@pytest.mark.parametrize("body, line, reason", [
    ("time_s,temp_c\n0,1\n60,2\n30,3\n", 4, "time must rise"),
    ("time_s,temp_c\n0,1\n60,2\n9000,3\n", 4, "gap of 8940 s"),
    ("time_s,temp_c\n0,1\n60,\n", 3, "empty cell"),
    ("time_s,temp_c\n0,1\n60,nan\n", 3, "not a finite number"),
    ("time,temp\n0,1\n", 1, "no unit"),
    ("when_s,temp_c\n0,1\n", 1, "missing column"),
])
def test_ambient_recording_errors_are_located_in_the_recording(tmp_path, profiles_dir, body, line, reason):
    csv = tmp_path / "rec.csv"
    csv.write_text(body)
    path = write(tmp_path, profiles_dir)
    path.write_text(path.read_text().replace("  diurnal_amplitude_k: 10.0\n",
                                             f"  diurnal_amplitude_k: 10.0\n  replay_csv: {csv.name}\n", 1))
    with pytest.raises(InputError) as err:
        load_scenario(path)
    problem = err.value.problems[0]
    assert problem.file == str(csv) and problem.line == line and reason in problem.reason


def test_a_recording_shorter_than_the_run_is_refused(tmp_path, profiles_dir):
    csv = tmp_path / "rec.csv"
    csv.write_text("time_s,temp_c\n0,1\n600,2\n")
    path = write(tmp_path, profiles_dir)
    path.write_text(path.read_text().replace("  diurnal_amplitude_k: 10.0\n",
                                             "  diurnal_amplitude_k: 10.0\n  replay_csv: rec.csv\n"))
    with pytest.raises(ProfileError, match="longer than the recording"):
        load_scenario(path)


def test_simulate_json_numbers_and_files(tmp_path, profiles_dir, cli):
    path = write(tmp_path, profiles_dir, extra="monte_carlo:\n  units: 4\n  chunk_units: 2\n")
    res = cli("simulate", path, "--json", "--workers", "1", "--plot", tmp_path / "plots", "--report",
              tmp_path / "report")
    assert res.status == 0, res.stderr
    doc = json.loads(res.stdout)
    runs = {r["name"]: r for r in doc["runs"]}
    assert set(runs) == {"uncompensated", "compensated"}
    # 72 minutes of a night near -2 C (5 C mean, 10 K daily swing, coldest hours): the bias fixed for 25 C
    # is 27 K off at 0.72 %/K (21.5 mV/K over 3 V), about 19 %; the table holds the gain.
    assert runs["compensated"]["gain_dev_max_abs_pct"] < 0.25
    assert runs["uncompensated"]["gain_dev_max_abs_pct"] > 20 * runs["compensated"]["gain_dev_max_abs_pct"]
    assert 17.0 < runs["uncompensated"]["gain_dev_max_abs_pct"] < 22.0
    assert doc["ticks"] == round(0.05 * 86400 * 0.2) and doc["name"] == "small"
    y = doc["yield"]
    assert y["units"] == 4 and y["strategy"] == "compensated" and 0.0 <= y["fraction_within"] <= 1.0
    assert len(y["worst"]) == 4 and y["chunks"] == 2 and y["executor"] == "inline"
    assert sorted(w["unit_index"] for w in y["worst"]) == [0, 1, 2, 3]
    assert {d["parameter"] for d in y["worst"][0]["draws"]} >= {"breakdown_v", "ntc_r25"}
    names = sorted(Path(f).name for f in doc["files"])
    assert names == ["report.html", "sim-bias.png", "sim-gain.png", "sim-temperatures.png", "sim-yield.png"]
    html = (tmp_path / "report" / "report.html").read_text()
    assert html.count("data:image/png;base64,") == 4 and "IEC 61010-1" in html
    # Again into the same folders: refused before any work, nothing rewritten.
    before = (tmp_path / "report" / "report.html").stat().st_mtime_ns
    again = cli("simulate", path, "--report", tmp_path / "report")
    assert again.status == 2 and "already exists" in again.stderr
    assert (tmp_path / "report" / "report.html").stat().st_mtime_ns == before


def test_simulate_text_output_names_strategies_and_ratio(tmp_path, profiles_dir, cli):
    path = write(tmp_path, profiles_dir)
    res = cli("simulate", path, "--strategy", "compensated", "--strategy", "uncompensated")
    assert res.status == 0, res.stderr
    ratio = re.search(r"largest absolute gain deviation: (\d+)x", res.stdout)
    assert ratio and int(ratio.group(1)) >= 20
    assert "caution" in res.stderr and "IEC 61010-1" in res.stderr


@pytest.mark.parametrize("argv, needle", [
    (["--days", "nan"], "--days"),
    (["--days", "-1"], "--days"),
    (["--units", "-3"], "--units"),
    (["--workers", "0"], "--workers"),
    (["--strategy", "magic"], "--strategy"),
    (["--scheduler", "tcp://127.0.0.1:9", "--workers", "2"], "--workers"),
])
def test_simulate_bad_arguments_exit_2(tmp_path, profiles_dir, cli, argv, needle):
    path = write(tmp_path, profiles_dir)
    res = cli("simulate", path, *argv)
    assert res.status == 2 and needle in res.stderr and "Traceback" not in res.stderr


def test_simulate_missing_scenario_file(cli, tmp_path):
    res = cli("simulate", tmp_path / "nothing.yaml")
    assert res.status == 2 and "nothing.yaml" in res.stderr and "cannot read" in res.stderr


def test_optional_sections_left_out_take_their_documented_defaults(tmp_path, profiles_dir):
    # No strategies, light, gain_trim, unit or monte_carlo section: the defaults of hardware_profiles/README.md
    # (uncompensated and compensated on, no light, no Monte Carlo) and a run of 0.05 days at 0.2 Hz = 864 ticks.
    from compensator.sim.run import simulate_scenario

    sc = load_scenario(write(tmp_path, profiles_dir))
    assert sc.strategies == ("uncompensated", "compensated")
    assert sc.section("light") == {"day_photon_rate_hz": 0.0, "night_photon_rate_hz": 0.0}
    assert sc.section("monte_carlo")["units"] == 0 and sc.section("unit")["breakdown_error_v"] == 0.0
    assert sc.section("gain_trim")["window_s"] == 600.0
    report = simulate_scenario(sc)
    assert [r.name for r in report.runs] == ["uncompensated", "compensated"] and report.ticks == 864
    assert report.yield_ is None
    # uncompensated at fixed bias drifts far more than the table (hut-sipm-a: 21.5 mV/K over 3 V)
    assert report.uncompensated_over_compensated > 20
