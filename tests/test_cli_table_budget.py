"""The ``budget`` and ``table`` commands end to end."""

import csv
import json

import pytest

PAIRS = [("hut-sipm-a.yaml", "hut-board-ntc.yaml", "3"), ("hut-sipm-b.yaml", "hut-board-pt1000.yaml", "4"),
         ("hut-sipm-c.yaml", "hut-board-pt1000.yaml", "5")]


def table_args(profiles_dir, out, sipm="hut-sipm-a.yaml", board="hut-board-ntc.yaml", ov="3", bound="0.05", *extra):
    return ("table", "--sipm", profiles_dir / sipm, "--board", profiles_dir / board, "--overvoltage-v", ov,
            "--max-gain-error-pct", bound, "--out", out, *extra)


@pytest.mark.parametrize("pair", PAIRS, ids=lambda p: p[0])
def test_budget_json_for_each_bundled_pair(cli, profiles_dir, pair):
    sipm, board, ov = pair
    result = cli("budget", "--sipm", profiles_dir / sipm, "--board", profiles_dir / board, "--overvoltage-v", ov,
                 "--samples", "400", "--seed", "5", "--json")
    assert result.status == 0, result.stderr
    data = json.loads(result.stdout)
    keys = {t["key"] for t in data["terms"]}
    assert {"sensor_tolerance", "adc_quantisation", "dac_quantisation", "dac_reference", "supply_network",
            "breakdown_calibration", "tempco_calibration", "series_resistor_drop", "divider_resistor"} <= keys
    assert data["dominant"] in keys and data["calibrated_dominant"] in keys
    assert data["monte_carlo"]["seed"] == 5 and data["monte_carlo"]["samples"] == 400
    assert 0.85 < data["monte_carlo"]["std_vs_rss"] < 1.15
    assert data["worst_case_pct"] > data["rss_pct"] > data["calibrated_rss_pct"] > 0


def test_budget_text(cli, profiles_dir):
    result = cli("budget", "--sipm", profiles_dir / "hut-sipm-b.yaml", "--board", profiles_dir / "hut-board-pt1000.yaml",
                 "--overvoltage-v", "4", "--law", "constant_overvoltage", "--samples", "200", "--seed", "9")
    assert result.status == 0, result.stderr
    out = result.stdout
    assert "dominant term: breakdown calibration; after calibration: tempco calibration" in out
    assert "seed 9" in out and "law residual" in out and "root-sum-square" in out


@pytest.mark.parametrize("argv, words", [
    (("--overvoltage-v", "40"), "--overvoltage-v: 40 V is outside"),
    (("--overvoltage-v", "3", "--calibration-temp-c", "90"), "--calibration-temp-c: 90 C is outside"),
    (("--overvoltage-v", "3", "--calibration-temp-c", "-300"), "--calibration-temp-c"),
    (("--overvoltage-v", "nan"), "--overvoltage-v"),
    (("--overvoltage-v", "3", "--seed", "-1"), "--seed: must be 0 or more, got -1"),
    (("--overvoltage-v", "3", "--ramp-k-per-min", "inf"), "--ramp-k-per-min"),
])
def test_budget_bad_input_exits_2(cli, profiles_dir, argv, words):
    result = cli("budget", "--sipm", profiles_dir / "hut-sipm-a.yaml", "--board", profiles_dir / "hut-board-ntc.yaml",
                 *argv, "--samples", "0")
    assert result.status == 2 and result.stdout == ""
    lines = result.stderr.strip().splitlines()
    assert words in lines[-1] and "Traceback" not in result.stderr
    # One line, or argparse's usage followed by its one error line.
    assert len(lines) == 1 or lines[-1].startswith("compensator budget: error: argument")


def test_budget_missing_profile(cli, profiles_dir, tmp_path):
    result = cli("budget", "--sipm", tmp_path / "nope.yaml", "--board", profiles_dir / "hut-board-ntc.yaml",
                 "--overvoltage-v", "3")
    assert result.status == 2 and "nope.yaml" in result.stderr


@pytest.mark.parametrize("pair", PAIRS, ids=lambda p: p[0])
@pytest.mark.parametrize("layout", ["uniform", "optimised"])
def test_table_json_files_and_sweep(cli, profiles_dir, tmp_path, pair, layout):
    sipm, board, ov = pair
    out = tmp_path / "out"
    result = cli(*table_args(profiles_dir, out, sipm, board, ov, "0.05", "--layout", layout, "--json"))
    assert result.status == 0, result.stderr
    data = json.loads(result.stdout)  # stdout is pure JSON
    assert "IEC 61010-1" in result.stderr and "licensed practice" in result.stderr
    for key in ("entries", "table_bytes", "uniform_table_bytes", "max_gain_error_pct", "max_error_dac_lsb",
                "c_function", "files"):
        assert key in data
    assert data["c_function"] == "uint16_t bias_dac_from_adc(uint16_t adc_code)"
    assert sorted(p.split("/")[-1] for p in data["files"]) == ["bias_dac_from_adc.c", "bias_dac_from_adc.h", "sweep.csv"]
    assert data["max_gain_error_pct"] <= 0.05
    if layout == "uniform":
        assert data["table_bytes"] == data["uniform_table_bytes"]
    with open(out / "sweep.csv", newline="") as handle:
        rows = list(csv.DictReader(handle))
    assert list(rows[0]) == ["adc_code", "temp_c", "ideal_bias_v", "table_dac_code", "table_bias_v", "gain_error_pct"]
    lo, hi = data["adc_code_range"]
    assert [int(r["adc_code"]) for r in rows] == list(range(lo, hi + 1))
    assert max(abs(float(r["gain_error_pct"])) for r in rows) <= 0.05
    temps = [float(r["temp_c"]) for r in rows]
    assert min(temps) == pytest.approx(-25.0, abs=0.06) and max(temps) == pytest.approx(45.0, abs=0.06)


def test_table_text_and_determinism(cli, profiles_dir, tmp_path):
    a, b = tmp_path / "a", tmp_path / "b"
    first = cli(*table_args(profiles_dir, a))
    second = cli(*table_args(profiles_dir, b))
    assert first.status == 0 and second.status == 0, first.stderr
    assert "caution" in first.stderr
    assert "entries" in first.stdout and "wrote" in first.stdout
    for name in ("bias_dac_from_adc.h", "bias_dac_from_adc.c", "sweep.csv"):
        assert (a / name).read_bytes() == (b / name).read_bytes()


def test_table_refuses_to_overwrite_without_force(cli, profiles_dir, tmp_path):
    out = tmp_path / "out"
    assert cli(*table_args(profiles_dir, out)).status == 0
    (out / "sweep.csv").write_text("mine\n")
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    result = cli(*table_args(profiles_dir, out, "hut-sipm-a.yaml", "hut-board-ntc.yaml", "3", "0.02"))
    assert result.status == 2 and "--force" in result.stderr and "Traceback" not in result.stderr
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    forced = cli(*table_args(profiles_dir, out, "hut-sipm-a.yaml", "hut-board-ntc.yaml", "3", "0.02", "--force"))
    assert forced.status == 0, forced.stderr
    assert (out / "sweep.csv").read_text().startswith("adc_code,")
    assert sorted(p.name for p in out.iterdir()) == ["bias_dac_from_adc.c", "bias_dac_from_adc.h", "sweep.csv"]


@pytest.mark.parametrize("argv, words", [
    (("hut-sipm-b.yaml", "hut-board-pt1000.yaml", "4", "0.005"), "DAC quantisation"),
    (("hut-sipm-a.yaml", "hut-board-ntc.yaml", "3", "0.01"), "ADC quantisation"),
    (("hut-sipm-b.yaml", "hut-board-ntc.yaml", "4", "0.05"), "output limit (supply maximum output)"),
    (("hut-sipm-a.yaml", "hut-board-ntc.yaml", "3", "-1"), "max-gain-error-pct"),
])
def test_table_cannot_meet_the_bound(cli, profiles_dir, tmp_path, argv, words):
    out = tmp_path / "out"
    result = cli(*table_args(profiles_dir, out, *argv, "--json"))
    assert result.status == 2
    assert words in result.stderr and "Traceback" not in result.stderr
    assert result.stdout == ""
    assert not out.exists()


def test_table_bad_name_and_out(cli, profiles_dir, tmp_path):
    result = cli(*table_args(profiles_dir, tmp_path / "o", "hut-sipm-a.yaml", "hut-board-ntc.yaml", "3", "0.05",
                             "--name", "2bad"))
    assert result.status == 2 and "C identifier" in result.stderr
    afile = tmp_path / "file"
    afile.write_text("x")
    result = cli(*table_args(profiles_dir, afile))
    assert result.status == 2 and "directory" in result.stderr
    assert afile.read_text() == "x"


def test_table_custom_name(cli, profiles_dir, tmp_path):
    result = cli(*table_args(profiles_dir, tmp_path, "hut-sipm-c.yaml", "hut-board-pt1000.yaml", "5", "0.05",
                             "--name", "hut_c_bias", "--json"))
    assert result.status == 0, result.stderr
    data = json.loads(result.stdout)
    assert data["c_function"] == "uint16_t hut_c_bias(uint16_t adc_code)"
    assert (tmp_path / "hut_c_bias.h").exists() and (tmp_path / "hut_c_bias.c").exists()


def test_table_measured_drop_correction(cli, profiles_dir, tmp_path):
    out = tmp_path / "out"
    result = cli(*table_args(profiles_dir, out, "hut-sipm-a.yaml", "hut-board-ntc.yaml", "3", "0.05",
                             "--drop-correction", "measured", "--json"))
    assert result.status == 0, result.stderr
    data = json.loads(result.stdout)
    assert data["drop_correction"] == "measured"
    cur = data["current_correction"]
    assert cur["c_function"] == ("uint16_t bias_dac_from_adc_with_current(uint16_t adc_code, "
                                 "uint16_t current_code)")
    # 10 kOhm x 3.3 V / 2^12 / 20 kOhm over -(2.5 V / 2^16) x 4 per DAC code (supply formula).
    assert cur["dac_codes_per_current_code"] == pytest.approx(-2.64)
    assert cur["current_code_max"] == 4095 and cur["max_correction_v"] == pytest.approx(1.6496, abs=1e-4)
    source = (out / "bias_dac_from_adc.c").read_text()
    assert "bias_dac_from_adc_with_current(uint16_t adc_code, uint16_t current_code)" in source
    assert "drop_correction = measured" in source
    # The table itself is the zero-current law: the same as with no correction.
    plain = tmp_path / "plain"
    assert cli(*table_args(profiles_dir, plain, "hut-sipm-a.yaml", "hut-board-ntc.yaml", "3", "0.05",
                           "--no-drop-correction")).status == 0
    assert (plain / "sweep.csv").read_bytes() == (out / "sweep.csv").read_bytes()
    text = cli(*table_args(profiles_dir, tmp_path / "text", "hut-sipm-a.yaml", "hut-board-ntc.yaml", "3", "0.05",
                           "--drop-correction", "measured"))
    assert text.status == 0 and "measured drop correction" in text.stdout and "-2.64 DAC codes" in text.stdout


@pytest.mark.parametrize("command", ["table", "budget"])
def test_measured_without_current_sense_is_one_line(cli, profiles_dir, tmp_path, command):
    out = tmp_path / "out"
    if command == "table":
        argv = table_args(profiles_dir, out, "hut-sipm-b.yaml", "hut-board-pt1000.yaml", "4", "0.05",
                          "--drop-correction", "measured")
    else:
        argv = ("budget", "--sipm", profiles_dir / "hut-sipm-b.yaml", "--board", profiles_dir / "hut-board-pt1000.yaml",
                "--overvoltage-v", "4", "--drop-correction", "measured")
    result = cli(*argv)
    assert result.status == 2 and "Traceback" not in result.stderr
    errors = [line for line in result.stderr.splitlines() if line.startswith("compensator:")]
    assert len(errors) == 1
    assert "hut-board-pt1000.yaml" in errors[0] and "current_sense" in errors[0] and "missing section" in errors[0]
    assert result.stdout == "" and not out.exists()


def test_budget_drop_correction_modes(cli, profiles_dir):
    def run(*extra):
        result = cli("budget", "--sipm", profiles_dir / "hut-sipm-a.yaml", "--board", profiles_dir / "hut-board-ntc.yaml",
                     "--overvoltage-v", "3", "--photon-rate-hz", "1e7", "--samples", "0", "--json", *extra)
        assert result.status == 0, result.stderr
        data = json.loads(result.stdout)
        return data, {t["key"]: t for t in data["terms"]}

    modelled, t_mod = run()
    measured, t_meas = run("--drop-correction", "measured")
    none, t_none = run("--no-drop-correction")
    assert (modelled["drop_correction"], measured["drop_correction"], none["drop_correction"]) == (
        "modelled", "measured", "none")
    assert run("--drop-correction", "none")[0] == none
    assert t_none["series_resistor_drop"]["kind"] == "systematic"
    assert t_meas["series_resistor_drop"]["kind"] == t_mod["series_resistor_drop"]["kind"] == "random"
    assert t_meas["series_resistor_drop"]["limit_pct"] < t_mod["series_resistor_drop"]["limit_pct"] / 10
    assert "measured" in t_meas["series_resistor_drop"]["note"]
    both = cli("budget", "--sipm", profiles_dir / "hut-sipm-a.yaml", "--board", profiles_dir / "hut-board-ntc.yaml",
               "--overvoltage-v", "3", "--drop-correction", "measured", "--no-drop-correction")
    assert both.status == 2 and "not allowed" in both.stderr
    text = cli("budget", "--sipm", profiles_dir / "hut-sipm-a.yaml", "--board", profiles_dir / "hut-board-ntc.yaml",
               "--overvoltage-v", "3", "--drop-correction", "measured", "--samples", "0")
    assert text.status == 0 and "drop corrected from the measured current" in text.stdout
