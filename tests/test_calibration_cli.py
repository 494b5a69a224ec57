"""``compensator calibrate`` end to end on the seeded demo data set (known truth in truth.json)."""

from __future__ import annotations

import io
import json
import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tools"))
import make_demo_data  # noqa: E402

from compensator.calibration.batch import Progress  # noqa: E402
from compensator.cli._common import EXIT_NOTHING_ANALYSED, EXIT_OK, EXIT_USAGE  # noqa: E402
from compensator.profiles import load_sipm  # noqa: E402


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    make_demo_data.write_demo_data(out)
    return out


@pytest.fixture(scope="module")
def truth(demo):
    return json.loads((demo / "truth.json").read_text())


def test_iv_json_contract_and_truth(cli, demo, truth):
    files = sorted(str(p) for p in (demo / "iv").glob("ch01_*.csv"))
    r = cli("calibrate", "iv", *files, "--json")
    assert r.status == 0, r.stderr
    doc = json.loads(r.stdout)
    assert [c["file"] for c in doc["curves"]] == files  # the path as given
    by_file = {c["file"]: c["breakdown_v"] for c in truth["iv_curves"]}
    for c in doc["curves"]:
        assert {"file", "temp_c", "breakdown_v", "breakdown_err_v", "method"} <= set(c)
        assert c["method"] == "inverse-log-derivative" and c["ok"]
        rel = str(Path(c["file"]).relative_to(demo))
        assert c["breakdown_v"] == pytest.approx(by_file[rel], abs=0.03)
        assert c["breakdown_err_v"] > 0


@pytest.mark.parametrize("method", ["log-derivative-peak", "second-derivative"])
def test_iv_other_methods(cli, demo, method):
    r = cli("calibrate", "iv", demo / "iv" / "ch02_p20C.csv", "--method", method, "--json")
    assert r.status == 0
    assert json.loads(r.stdout)["curves"][0]["method"] == method


def test_iv_bad_files_one_line_each_and_batch_goes_on(cli, demo, tmp_path):
    good = demo / "iv" / "ch03_p10C.csv"
    missing = tmp_path / "nope.csv"
    no_column = tmp_path / "cols.csv"
    no_column.write_text("voltage,current_a\n1,2\n")
    bad_cell = tmp_path / "cell.csv"
    bad_cell.write_text("bias_v,current_a\n20.0,1e-10\n20.1,oops\n")
    negative = tmp_path / "neg.csv"
    text = good.read_text().splitlines()
    text[5] = text[5].replace(text[5].split(",")[1], "-1e-12", 1)
    negative.write_text("\n".join(text) + "\n")
    r = cli("calibrate", "iv", missing, no_column, good, bad_cell, negative, "--json")
    assert r.status == 0
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 4
    assert lines[0] == f"compensator: {missing}: no such file"
    # a bias column without a unit is refused with a suggestion (bench-export reader)
    assert lines[1].startswith(f"compensator: {no_column}:1: voltage: no unit") and "--columns bias=" in lines[1]
    assert lines[2].startswith(f"compensator: {bad_cell}:3: current_a: not a number")
    assert lines[3].startswith(f"compensator: {negative}: ") and "negative" in lines[3]
    doc = json.loads(r.stdout)
    assert [c["ok"] for c in doc["curves"]] == [False, False, True, False, False]
    assert doc["curves"][2]["breakdown_v"] is not None
    assert "Traceback" not in r.stderr
    # Every file failed on input (the user's mistake): exit 2, one located line per file.
    none = cli("calibrate", "iv", missing, no_column)
    assert none.status == EXIT_USAGE == 2 and len(none.stderr.strip().splitlines()) == 2


def test_iv_temperature_from_option_and_plot(cli, demo, tmp_path):
    src = tmp_path / "plain.csv"
    rows = (demo / "iv" / "ch01_p20C.csv").read_text().splitlines()
    src.write_text("\n".join(",".join(r.split(",")[:2]) for r in rows) + "\n")
    r = cli("calibrate", "iv", src, "--temp-c", "21.5", "--json", "--plot", tmp_path / "plots")
    assert r.status == 0
    assert json.loads(r.stdout)["curves"][0]["temp_c"] == 21.5
    png = tmp_path / "plots" / "plain-iv.png"
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_iv_process_pool_gives_identical_results(cli, demo):
    files = sorted(str(p) for p in (demo / "iv").glob("*.csv"))[:8]
    one = json.loads(cli("calibrate", "iv", *files, "--json").stdout)
    two = json.loads(cli("calibrate", "iv", *files, "--json", "--jobs", "2").stdout)
    assert one == two


def test_spectrum_json_contract_and_plot(cli, demo, truth, tmp_path):
    spec = truth["spectra_files"][2]
    r = cli("calibrate", "spectrum", demo / spec["file"], "--json", "--plot", tmp_path)
    assert r.status == 0, r.stderr
    s = json.loads(r.stdout)["spectra"][0]
    assert {"file", "gain_in_charge_unit", "gain_err_in_charge_unit", "pedestal_in_charge_unit", "mean_pe",
            "crosstalk_branching_ratio"} <= set(s)
    assert s["file"] == str(demo / spec["file"]) and s["charge_unit"] == "pc"
    assert s["gain_in_charge_unit"] == pytest.approx(spec["gain_pc"], rel=0.005)
    # Both crosstalk figures: the branching ratio lambda and the probability 1 - exp(-lambda)
    # (Vinogradov, NIM A 695, 247, 2012), with the error propagated as exp(-lambda) err(lambda).
    lam, lam_err = s["crosstalk_branching_ratio"], s["crosstalk_branching_ratio_err"]
    assert s["crosstalk_fraction"] == pytest.approx(1.0 - np.exp(-lam), rel=1e-9)
    assert s["crosstalk_fraction_err"] == pytest.approx(np.exp(-lam) * lam_err, rel=1e-9)
    assert (tmp_path / f"{Path(spec['file']).stem}-spectrum.png").exists()
    bad = tmp_path / "empty.csv"
    bad.write_text("charge,counts\n0.1,0\n0.2,0\n")
    r = cli("calibrate", "spectrum", bad)  # refused by the reader: the user's mistake
    assert r.status == EXIT_USAGE == 2 and r.stderr.count("\n") == 1 and f"{bad}: counts: " in r.stderr


def test_spectrum_fit_range_and_amplitude_models(cli, demo, truth):
    spec = truth["spectra_files"][2]
    path = demo / spec["file"]
    whole = json.loads(cli("calibrate", "spectrum", path, "--json").stdout)["spectra"][0]
    wide = json.loads(cli("calibrate", "spectrum", path, "--json", "--fit-range", "-100", "100").stdout)["spectra"][0]
    assert wide["gain_in_charge_unit"] == pytest.approx(whole["gain_in_charge_unit"], rel=1e-9)
    # A window holding only the pedestal cannot give a gain: a one-line failure, exit 2.
    narrow = cli("calibrate", "spectrum", path, "--fit-range", "-100",
                 str(whole["pedestal_in_charge_unit"] + 0.2 * whole["gain_in_charge_unit"]))
    assert narrow.status == EXIT_NOTHING_ANALYSED == 3 and narrow.stderr.count("\n") == 1 and "fit failed" in narrow.stderr
    free = json.loads(cli("calibrate", "spectrum", path, "--json", "--amplitudes", "free").stdout)["spectra"][0]
    assert free["gain_in_charge_unit"] == pytest.approx(spec["gain_pc"], rel=0.005)


def test_gain_scan_tables_and_manifest(cli, demo, truth):
    files = sorted(str(p) for p in (demo / "gain").glob("*.csv"))
    r = cli("calibrate", "gain-scan", *files, "--json")
    assert r.status == 0, r.stderr
    scans = json.loads(r.stdout)["scans"]
    by_file = {s["file"]: s for s in truth["gain_scans"]}
    for s in scans:
        t = by_file[str(Path(s["file"]).relative_to(demo))]
        assert s["breakdown_v"] == pytest.approx(t["breakdown_v"], abs=3 * s["breakdown_err_v"])
        assert s["capacitance_f"] == pytest.approx(t["capacitance_f"], abs=3 * s["capacitance_err_f"])
        assert s["breakdown_err_v"] > 0 and s["capacitance_err_f"] > 0
    r = cli("calibrate", "gain-scan", "--manifest", demo / "spectra" / "manifest.csv", "--charge-per-unit-c", "1e-12",
            "--json")
    assert r.status == 0, r.stderr
    scan = json.loads(r.stdout)["scans"][0]
    assert scan["temp_c"] == 25.0 and len(scan["spectra"]) == 5
    assert scan["breakdown_v"] == pytest.approx(truth["breakdown_v_at_ref"], abs=3 * scan["breakdown_err_v"])
    assert scan["capacitance_f"] == pytest.approx(truth["capacitance_f"], abs=3 * scan["capacitance_err_f"])


def test_gain_scan_spectra_need_one_bias_each(cli, demo):
    files = sorted(str(p) for p in (demo / "spectra").glob("ch01_*.csv"))
    r = cli("calibrate", "gain-scan", "--spectra", *files, "--bias-v", "26.0", "27.0")
    assert r.status == 2 and "--bias-v" in r.stderr and "Traceback" not in r.stderr


def test_tempco_contract_from_iv_json_and_profile(cli, demo, truth, tmp_path, profiles_dir):
    files = sorted(str(p) for p in (demo / "iv").glob("ch01_*.csv"))
    iv_json = tmp_path / "iv.json"
    iv_json.write_text(cli("calibrate", "iv", *files, "--json").stdout)
    new = tmp_path / "cal.yaml"
    base = profiles_dir / "hut-sipm-a.yaml"
    r = cli("calibrate", "tempco", iv_json, "--json", "--write-profile", new, "--base", base, "--plot", tmp_path)
    assert r.status == 0, r.stderr
    doc = json.loads(r.stdout)
    for key in ("tempco_mv_per_k", "tempco_err_mv_per_k", "breakdown_v_at_ref", "ref_temp_c", "curvature_mv_per_k2"):
        assert key in doc
    assert doc["tempco_mv_per_k"] == pytest.approx(truth["tempco_mv_per_k"], rel=0.01)
    assert "caution" in r.stderr and "IEC 61010-1" in r.stderr
    prof = load_sipm(new)
    assert prof.device.breakdown.tempco_mv_per_k == pytest.approx(doc["tempco_mv_per_k"], abs=1e-4)
    assert prof.device.breakdown.breakdown_v_at_ref == pytest.approx(doc["breakdown_v_at_ref"], abs=1e-6)
    assert prof.device.breakdown.tempco_err_mv_per_k == pytest.approx(doc["tempco_err_mv_per_k"], abs=1e-4)
    assert (tmp_path / "iv-tempco.png").exists()
    before = new.read_bytes()
    again = cli("calibrate", "tempco", iv_json, "--write-profile", new, "--base", base)
    assert again.status == 2 and "already exists" in again.stderr and new.read_bytes() == before
    forced = cli("calibrate", "tempco", iv_json, "--write-profile", new, "--base", base, "--force", "--name", "ch01")
    assert forced.status == 0 and load_sipm(new).name == "ch01"
    nobase = cli("calibrate", "tempco", iv_json, "--write-profile", tmp_path / "x.yaml")
    assert nobase.status == 2 and "--base" in nobase.stderr and not (tmp_path / "x.yaml").exists()


def test_tempco_from_gain_scans_gives_constant_gain_slope(cli, demo, truth, tmp_path):
    files = sorted(str(p) for p in (demo / "gain").glob("*.csv"))
    gs = tmp_path / "gs.json"
    gs.write_text(cli("calibrate", "gain-scan", *files, "--json").stdout)
    doc = json.loads(cli("calibrate", "tempco", gs, "--json").stdout)
    assert doc["tempco_mv_per_k"] == pytest.approx(truth["tempco_mv_per_k"], abs=3 * doc["tempco_err_mv_per_k"])
    cg = doc["constant_gain"]
    # dV/dT at constant gain = tempco - Vov * alpha_C (first order, derived in test_calibration_tempco).
    expected = truth["tempco_mv_per_k"] - 1e3 * 3.0 * 1e-6 * truth["capacitance_tempco_ppm_per_k"]
    assert cg["bias_slope_mv_per_k"] == pytest.approx(expected, abs=3 * cg["bias_slope_err_mv_per_k"])


def test_tempco_csv_and_bad_input(cli, demo, tmp_path):
    r = cli("calibrate", "tempco", demo / "breakdown_scan.csv")
    assert r.status == 0 and "mV/K" in r.stdout
    one = tmp_path / "one.csv"
    one.write_text("temp_c,breakdown_v\n25,24.5\n25,24.51\n")
    r = cli("calibrate", "tempco", one)  # read, but one temperature carries no coefficient: nothing analysed
    assert r.status == EXIT_NOTHING_ANALYSED == 3 and r.stderr.startswith(f"compensator: {one}: ")
    assert "2 distinct temperatures, got 1" in r.stderr and r.stderr.count("\n") == 1 and r.stdout == ""
    junk = tmp_path / "junk.json"
    junk.write_text("{not json")
    r = cli("calibrate", "tempco", junk)
    assert r.status == 2 and "invalid JSON" in r.stderr


def test_progress_bar_draws_on_request():
    stream = io.StringIO()
    with Progress(4, "work", stream=stream, enabled=True) as bar:
        bar.update(2)
        bar.update(2)
    assert "4/4" in stream.getvalue() and stream.getvalue().endswith("\n")
    quiet = io.StringIO()
    with Progress(4, "work", stream=quiet) as bar:  # not a terminal: silent
        bar.update(4)
    assert quiet.getvalue() == ""


def test_demo_data_is_deterministic_and_never_overwritten(demo, tmp_path):
    again = tmp_path / "again"
    make_demo_data.main([str(again)])
    for path in sorted(demo.rglob("*")):
        if path.is_file():
            assert (again / path.relative_to(demo)).read_bytes() == path.read_bytes()
    assert make_demo_data.main([str(again)]) == 2
    assert make_demo_data.main([str(again), "--force"]) == 0


def test_spectrum_event_list_in_adc_counts(cli, tmp_path):
    from compensator.calibration.spectrum import simulate_events

    rng = __import__("numpy").random.default_rng(5)
    q = simulate_events(rng, gain=42.0, pedestal=200.0, sigma0=4.0, sigma1=1.5, mean_pe=1.8, crosstalk=0.06,
                        n_events=20000)
    path = tmp_path / "events.csv"
    path.write_text("event,charge_adc\n" + "".join(f"{i},{v:.2f}\n" for i, v in enumerate(q)))
    r = cli("calibrate", "spectrum", path, "--json")
    assert r.status == 0, r.stderr
    s = json.loads(r.stdout)["spectra"][0]
    assert s["charge_unit"] == "adc"
    assert s["gain_in_charge_unit"] == pytest.approx(42.0, rel=0.01)


@pytest.mark.parametrize("text, fragment", [
    ("", "empty file"),
    ("bias_v,current_a\n", "no data rows"),
    ("bias_v,current_a,temp_c\n20,1e-10,10\n20.1,1e-10,15\n", "temperature varies"),
    ("bias_v,current_a\n20,inf\n", "not a finite number"),
    ("bias_v,current_a\n20\n", "empty cell"),
])
def test_csv_reader_names_file_line_column_and_reason(cli, tmp_path, text, fragment):
    path = tmp_path / "bad.csv"
    path.write_text(text)
    r = cli("calibrate", "iv", path)
    assert r.status == EXIT_USAGE == 2
    assert r.stderr.startswith(f"compensator: {path}") and fragment in r.stderr
    assert r.stderr.count("\n") == 1


def test_gain_table_checks_and_manifest_paths(cli, demo, tmp_path):
    bad = tmp_path / "g.csv"
    bad.write_text("bias_v,gain,gain_err\n26,1e6,0\n27,2e6,1e4\n28,3e6,1e4\n")
    r = cli("calibrate", "gain-scan", bad)
    assert r.status == EXIT_USAGE == 2 and f"{bad}:2: gain_err: gain errors must be positive" in r.stderr
    manifest = tmp_path / "m.csv"
    lines = (demo / "spectra" / "manifest.csv").read_text().splitlines()
    rows = [lines[0]] + [f"{demo / 'spectra' / ln.split(',')[0]},{ln.split(',', 1)[1]}" for ln in lines[1:4]]
    rows.append("missing.csv,29.0,25.0")
    manifest.write_text("\n".join(rows) + "\n")
    r = cli("calibrate", "gain-scan", "--manifest", manifest, "--json")
    assert r.status == 0
    assert r.stderr.strip() == f"compensator: {tmp_path / 'missing.csv'}: no such file"
    scan = json.loads(r.stdout)["scans"][0]
    assert scan["n_points"] == 3 and scan["capacitance_f"] is None and scan["gain_unit"] == "pc"


def test_tempco_per_channel_from_file_names(cli, demo, truth, tmp_path, profiles_dir):
    from scipy import stats

    files = sorted(str(p) for p in (demo / "iv").glob("ch*.csv"))
    iv_json = tmp_path / "iv.json"
    r = cli("calibrate", "iv", *files, "--json", "--channel-from-name", r"^(ch\d+)_")
    assert r.status == 0, r.stderr
    doc = json.loads(r.stdout)
    assert doc["definition"] == "iv_inverse_log_derivative"
    assert {c["channel"] for c in doc["curves"]} == {"ch01", "ch02", "ch03", "ch04"}
    iv_json.write_text(r.stdout)
    pooled = cli("calibrate", "tempco", iv_json, "--json", "--pool")
    pdoc = json.loads(pooled.stdout)
    assert pdoc["channels"] == []
    # Four devices with offsets of tens of mV fitted as one: improbable chi2, p from scipy.stats.chi2.
    # (chi2 is printed to 12 significant digits and d ln p / d chi2 is about -1/2: rel 1e-8 covers the rounding.)
    assert pdoc["chi2_p_value"] == pytest.approx(stats.chi2.sf(pdoc["chi2"], pdoc["ndf"]), rel=1e-8, abs=1e-300)
    assert pdoc["chi2_p_value"] < 1e-3 and "improbable" in pooled.stderr
    assert [w["code"] for w in pdoc["warnings"]] == ["chi2_improbable"]
    out = cli("calibrate", "tempco", iv_json, "--json")
    doc = json.loads(out.stdout)
    chans = {c["channel"]: c for c in doc["channels"]}
    assert sorted(chans) == ["ch01", "ch02", "ch03", "ch04"]
    offsets = truth["channel_offsets_v"]
    for i, name in enumerate(sorted(chans)):
        c = chans[name]
        assert c["tempco_mv_per_k"] == pytest.approx(truth["tempco_mv_per_k"], abs=3 * c["tempco_err_mv_per_k"] + 0.05)
        # the I-V breakdown sits iv_definition_offset_v above the gain intercept of the truth
        assert c["breakdown_v_at_ref"] == pytest.approx(
            truth["breakdown_v_at_ref"] + offsets[i] + truth["iv_definition_offset_v"], abs=3 * c["breakdown_err_v_at_ref"])
        assert c["points"] == 7
    # (the tempcos are printed to 12 significant digits; their spread is a thousandth of them)
    assert doc["tempco_spread_mv_per_k"] == pytest.approx(
        np.std([c["tempco_mv_per_k"] for c in doc["channels"]], ddof=1), rel=1e-7)
    base = profiles_dir / "hut-sipm-a.yaml"
    lumped = cli("calibrate", "tempco", iv_json, "--write-profile", tmp_path / "one.yaml", "--base", base)
    assert lumped.status == 2 and "--pool" in lumped.stderr and not (tmp_path / "one.yaml").exists()
    per = cli("calibrate", "tempco", iv_json, "--write-profile", str(tmp_path / "cal-{channel}.yaml"), "--base", base)
    assert per.status == 0, per.stderr
    prof = load_sipm(tmp_path / "cal-ch03.yaml")
    assert prof.device.breakdown.breakdown_v_at_ref == pytest.approx(chans["ch03"]["breakdown_v_at_ref"], abs=1e-6)
    assert prof.values["breakdown"]["definition"] == "iv_inverse_log_derivative"


def test_tempco_moved_onto_the_gain_intercept_by_the_measured_offset(cli, demo, truth, tmp_path, profiles_dir):
    # I-V curves of four channels and gain scans of channel 1 at the same seven temperatures: the
    # offset between the definitions is measured (truth: the gain intercept lies 120 mV below the
    # I-V breakdown of these invented devices) and the profile is written on the gain intercept.
    iv = cli("calibrate", "iv", *sorted((demo / "iv").glob("ch*.csv")), "--json", "--channel-from-name", r"^(ch\d+)_")
    gain = cli("calibrate", "gain-scan", *sorted((demo / "gain").glob("*.csv")), "--json")
    assert iv.status == 0 and gain.status == 0, iv.stderr + gain.stderr
    (tmp_path / "iv.json").write_text(iv.stdout)
    (tmp_path / "gain.json").write_text(gain.stdout)
    lumped = cli("calibrate", "tempco", tmp_path / "iv.json", "--offset-from", tmp_path / "gain.json")
    assert lumped.status == 2 and "--channel" in lumped.stderr and lumped.stderr.count("\n") == 1
    out = tmp_path / "gain-intercept.yaml"
    r = cli("calibrate", "tempco", tmp_path / "iv.json", "--channel", "ch01", "--offset-from", tmp_path / "gain.json",
            "--json", "--write-profile", out, "--base", profiles_dir / "hut-sipm-a.yaml")
    assert r.status == 0, r.stderr
    doc = json.loads(r.stdout)
    off = doc["definition_offset"]
    assert off["matched_points"] == 7 and off["from_definition"] == "iv_inverse_log_derivative"
    assert off["definition"] == doc["definition"] == "gain_intercept"
    assert off["definition_offset_v"] == pytest.approx(-truth["iv_definition_offset_v"],
                                                       abs=3 * off["definition_offset_err_v"])
    assert 0 < off["definition_offset_err_v"] < 0.01
    assert doc["breakdown_v_at_ref"] == pytest.approx(truth["breakdown_v_at_ref"], abs=3 * doc["breakdown_err_v_at_ref"])
    assert doc["tempco_mv_per_k"] == pytest.approx(truth["tempco_mv_per_k"], abs=3 * doc["tempco_err_mv_per_k"])
    prof = load_sipm(out)
    assert prof.values["breakdown"]["definition"] == "gain_intercept"
    assert prof.device.breakdown.breakdown_v_at_ref == pytest.approx(doc["breakdown_v_at_ref"], abs=1e-6)
    text = cli("calibrate", "tempco", tmp_path / "iv.json", "--channel", "ch01", "--offset-from", tmp_path / "gain.json")
    assert f"{1e3 * off['definition_offset_v']:+.1f} +- {1e3 * off['definition_offset_err_v']:.1f} mV" in text.stdout
    for other, fragment in ((tmp_path / "iv.json", "no offset to measure"),
                            (demo / "breakdown_scan.csv", "does not say which breakdown definition")):
        bad = cli("calibrate", "tempco", tmp_path / "iv.json", "--channel", "ch01", "--offset-from", other)
        assert bad.status == 2 and bad.stderr.count("\n") == 1 and fragment in bad.stderr, bad.stderr
    unknown = cli("calibrate", "tempco", tmp_path / "iv.json", "--channel", "ch09")
    assert unknown.status == 2 and "ch01, ch02, ch03, ch04" in unknown.stderr


def test_plots_are_not_replaced_without_force(cli, demo, tmp_path):
    path = demo / "iv" / "ch01_p20C.csv"
    assert cli("calibrate", "iv", path, "--plot", tmp_path).status == 0
    png = tmp_path / "ch01_p20C-iv.png"
    before = png.read_bytes()
    again = cli("calibrate", "iv", path, "--plot", tmp_path, "--json")
    assert again.status == 2 and "--force" in again.stderr and again.stdout == "" and png.read_bytes() == before
    forced = cli("calibrate", "iv", path, "--plot", tmp_path, "--force", "--json")
    assert forced.status == 0 and json.loads(forced.stdout)["curves"][0]["breakdown_v"] > 20.0


def test_iv_bench_export_with_column_map_and_notes(cli, demo, tmp_path, truth):
    rows = (demo / "iv" / "ch01_p20C.csv").read_text().splitlines()
    header = rows[0].split(",")
    bi, ci = header.index("bias_v"), header.index("current_a")
    out = ["Vsrc;Imeas"] + [f"{r.split(',')[bi].replace('.', ',')};{float(r.split(',')[ci]) * 1e6:.6e}"
                            for r in rows[1:]]
    path = tmp_path / "export.csv"
    path.write_text("\n".join(out) + "\n")
    r = cli("calibrate", "iv", path, "--columns", "bias=Vsrc:v,current=Imeas:ua", "--temp-c", "20", "--json")
    assert r.status == 0, r.stderr
    curve = json.loads(r.stdout)["curves"][0]
    expected = {c["file"]: c["breakdown_v"] for c in truth["iv_curves"]}["iv/ch01_p20C.csv"]
    assert curve["breakdown_v"] == pytest.approx(expected, abs=3 * curve["breakdown_err_v"] + 0.005)
    assert "converted from microampere to ampere" in r.stderr and "decimal commas" in r.stderr
    bad = cli("calibrate", "iv", path, "--columns", "bias=nope")
    assert bad.status == EXIT_USAGE and "nope" in bad.stderr and bad.stderr.count("\n") == 1


def test_write_profile_to_a_directory_is_named_as_such(cli, demo, tmp_path, profiles_dir):
    r = cli("calibrate", "tempco", demo / "breakdown_scan.csv", "--write-profile", tmp_path,
            "--base", profiles_dir / "hut-sipm-a.yaml")
    assert r.status == 2 and "is a directory" in r.stderr and r.stderr.count("\n") == 1


def _flat_iv(path):
    """A readable I-V curve with no breakdown in it (an ohmic leak only): read, then not analysable."""
    bias = np.linspace(20.0, 30.0, 101)
    path.write_text("bias_v,current_a\n" + "".join(f"{v:.3f},{1e-9 * (1 + 0.01 * v):.6e}\n" for v in bias))
    return path


def test_exit_status_rule_of_every_subcommand(cli, demo, truth, tmp_path):
    """Exit 2 when every file failed on input, 3 when inputs were valid but nothing was analysed, else 0."""
    binary = tmp_path / "binary.csv"
    binary.write_bytes(bytes(range(256)) * 64)
    nan = tmp_path / "nan.csv"
    nan.write_text("bias_v,current_a\nnan,nan\n1,2\n")
    flat = _flat_iv(tmp_path / "flat.csv")
    good = demo / "iv" / "ch01_p20C.csv"
    # iv: bad input only -> 2, one located line per file
    r = cli("calibrate", "iv", binary, nan)
    assert r.status == EXIT_USAGE == 2 and r.stderr.splitlines() == [
        f"compensator: {binary}:1: not a text file (a NUL byte); export the data as CSV text",
        f"compensator: {nan}:2: bias_v: not a finite number: 'nan'"]
    # iv: read but not analysable -> 3, with the reason and its numbers
    r = cli("calibrate", "iv", flat, "--json")
    assert r.status == EXIT_NOTHING_ANALYSED == 3
    curve = json.loads(r.stdout)["curves"][0]
    assert curve["ok"] is False and "1.08-fold between 20 V and 30 V" in curve["reason"]
    # iv: bad input and an analysis failure, nothing analysed -> 2 (not every input was valid)
    assert cli("calibrate", "iv", flat, nan).status == 2
    # iv: one good curve among failures -> 0; the failures are in the JSON with ok false and a reason
    r = cli("calibrate", "iv", binary, flat, good, "--json")
    assert r.status == EXIT_OK == 0 and r.stderr.count("\n") == 2
    c = json.loads(r.stdout)["curves"]
    assert [x["ok"] for x in c] == [False, False, True] and all(x["reason"] for x in c[:2]) and c[2]["reason"] is None
    expected = {x["file"]: x["breakdown_v"] for x in truth["iv_curves"]}["iv/ch01_p20C.csv"]
    assert c[2]["breakdown_v"] == pytest.approx(expected, abs=0.03)

    # spectrum: bad input -> 2; a readable spectrum whose fit fails -> 3 (test_spectrum_fit_range...); mixed -> 0
    spec = truth["spectra_files"][2]
    assert cli("calibrate", "spectrum", binary).status == 2
    r = cli("calibrate", "spectrum", binary, demo / spec["file"], "--json")
    assert r.status == 0 and [s["ok"] for s in json.loads(r.stdout)["spectra"]] == [False, True]
    assert json.loads(r.stdout)["spectra"][1]["gain_in_charge_unit"] == pytest.approx(spec["gain_pc"], rel=0.005)

    # gain-scan: a table refused by the reader -> 2; a table read whose gain falls with bias -> 3; mixed -> 0
    falling = tmp_path / "falling.csv"
    falling.write_text("bias_v,gain\n26,3e6\n27,2e6\n28,1e6\n")
    assert cli("calibrate", "gain-scan", binary).status == 2
    r = cli("calibrate", "gain-scan", falling, "--json")
    assert r.status == 3 and "gain does not rise with bias" in r.stderr and r.stderr.count("\n") == 1
    assert json.loads(r.stdout)["scans"][0]["ok"] is False
    gain_file = demo / truth["gain_scans"][0]["file"]
    r = cli("calibrate", "gain-scan", falling, gain_file, "--json")
    scan = json.loads(r.stdout)["scans"][1]
    assert r.status == 0 and scan["breakdown_v"] == pytest.approx(truth["gain_scans"][0]["breakdown_v"],
                                                                  abs=3 * scan["breakdown_err_v"])
    # gain-scan from spectra: every spectrum missing -> 2 (one line per file plus the scan's)
    r = cli("calibrate", "gain-scan", "--spectra", tmp_path / "a.csv", tmp_path / "b.csv", tmp_path / "c.csv",
            "--bias-v", "26", "27", "28")
    assert r.status == 2 and r.stderr.count("no such file") == 3

    # tempco: one file; refused by the reader -> 2, read but no coefficient in it -> 3 (test_tempco_csv_and_bad_input)
    assert cli("calibrate", "tempco", binary).status == 2


def test_batch_status_classifies_a_batch():
    from types import SimpleNamespace as R

    from compensator.calibration.batch import BatchStatus, batch_status

    good, bad_input, failed = R(ok=True, failed_on_input=False), R(ok=False, failed_on_input=True), \
        R(ok=False, failed_on_input=False)
    assert batch_status([bad_input, failed, good]) is BatchStatus.ANALYSED
    assert batch_status([bad_input, bad_input]) is BatchStatus.BAD_INPUT
    assert batch_status([bad_input, failed]) is BatchStatus.BAD_INPUT
    assert batch_status([failed, failed]) is BatchStatus.NOTHING_ANALYSED
    assert batch_status([]) is BatchStatus.BAD_INPUT
