"""Crosstalk of a SiPM profile from fitted branching ratios: the conversion p = 1 - exp(-lambda) and the
overvoltage scaling, against independent computations (Vinogradov, NIM A 695, 247, 2012 for the relation)."""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path

import numpy as np
import pytest

from compensator.calibration.crosstalk import calibrate_crosstalk, crosstalk_values
from compensator.errors import ModelError

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tools"))
import make_demo_data  # noqa: E402

sys.path.pop(0)


def test_probability_is_that_of_at_least_one_poisson_secondary():
    # Vinogradov, NIM A 695, 247, 2012: each avalanche triggers a Poisson number of secondaries with mean lambda,
    # so P(at least one) = 1 - exp(-lambda); at lambda = 0.3 that is 0.2592, about 14 % below lambda.
    cal = calibrate_crosstalk([0.3], [3.0], branching_ratio_err=[0.01], ref_overvoltage_v=3.0, overvoltage_exponent=2.0)
    assert cal.probability_at_ref == pytest.approx(1.0 - math.exp(-0.3), rel=1e-12)
    assert cal.probability_at_ref == pytest.approx(0.259182, abs=1e-6)
    assert cal.probability_err_at_ref == pytest.approx(math.exp(-0.3) * 0.01, rel=1e-12)  # first-order propagation
    # Independent: count the secondaries of 400,000 seeded avalanches.
    secondaries = np.random.default_rng(7).poisson(0.3, 400_000)
    assert np.mean(secondaries > 0) == pytest.approx(cal.probability_at_ref, abs=3 * math.sqrt(0.26 * 0.74 / 4e5))
    assert cal.model == "branching_poisson" and not cal.exponent_fitted and cal.points == 1 and cal.ndf == 0


def test_one_overvoltage_is_scaled_with_the_given_exponent():
    # lambda(V) = lambda_ref (V / Vref)^n; two spectra at 2 V, n = 2: lambda_ref = lambda * (3/2)^2, their
    # weighted mean by hand.
    lam, err = np.array([0.040, 0.036]), np.array([0.002, 0.001])
    cal = calibrate_crosstalk(lam, [2.0, 2.0], branching_ratio_err=err, ref_overvoltage_v=3.0, overvoltage_exponent=2.0)
    scaled, serr = lam * 2.25, err * 2.25
    w = 1 / serr ** 2
    mean = (w[0] * scaled[0] + w[1] * scaled[1]) / (w[0] + w[1])
    assert cal.branching_ratio_at_ref == pytest.approx(mean, rel=1e-12)
    assert cal.branching_ratio_err_at_ref == pytest.approx((w[0] + w[1]) ** -0.5, rel=1e-12)
    assert cal.chi2 == pytest.approx(np.sum(w * (scaled - mean) ** 2), rel=1e-12) and cal.ndf == 1
    assert cal.overvoltage_exponent == 2.0 and math.isnan(cal.overvoltage_exponent_err)


def test_several_overvoltages_give_the_exponent():
    ov = np.array([2.0, 2.5, 3.0, 3.5, 4.0])
    lam = 0.08 * (ov / 3.0) ** 2.0  # the demo's law, noiseless: the log-log line is exact
    cal = calibrate_crosstalk(lam, ov, branching_ratio_err=0.02 * lam, ref_overvoltage_v=3.0, overvoltage_exponent=9.0)
    assert cal.exponent_fitted and cal.overvoltage_exponent == pytest.approx(2.0, abs=1e-10)
    assert cal.branching_ratio_at_ref == pytest.approx(0.08, rel=1e-10)
    assert cal.probability_at_ref == pytest.approx(1.0 - math.exp(-0.08), rel=1e-10)
    # The errors against scipy's weighted least squares of the same line (scipy.optimize.curve_fit, absolute sigma).
    from scipy.optimize import curve_fit

    x, y, sy = np.log(ov / 3.0), np.log(lam), np.full(ov.size, 0.02)
    _, pcov = curve_fit(lambda x, a, n: a + n * x, x, y, sigma=sy, absolute_sigma=True)
    assert cal.overvoltage_exponent_err == pytest.approx(math.sqrt(pcov[1, 1]), rel=1e-6)
    assert cal.branching_ratio_err_at_ref == pytest.approx(0.08 * math.sqrt(pcov[0, 0]), rel=1e-6)


@pytest.mark.parametrize("kwargs, key", [
    ({"branching_ratio": [0.0]}, "branching_ratio"),
    ({"branching_ratio": [1.2]}, "branching_ratio"),
    ({"branching_ratio_err": [0.0]}, "branching_ratio_err"),
    ({"overvoltage_v": [-1.0]}, "overvoltage_v"),
    ({"overvoltage_v": [1.0, 2.0]}, "branching_ratio"),
    ({"ref_overvoltage_v": float("nan")}, "ref_overvoltage_v"),
])
def test_refusals_name_their_key(kwargs, key):
    args = {"branching_ratio": [0.1], "overvoltage_v": [3.0], "branching_ratio_err": [0.01], "ref_overvoltage_v": 3.0,
            "overvoltage_exponent": 2.0} | kwargs
    with pytest.raises(ModelError) as exc:
        calibrate_crosstalk(args.pop("branching_ratio"), args.pop("overvoltage_v"), **args)
    assert exc.value.key == key


def test_profile_values_leave_the_base_untouched(sipm_a):
    cal = calibrate_crosstalk([0.1, 0.2], [2.0, 3.0], branching_ratio_err=[0.01, 0.01], ref_overvoltage_v=3.0,
                              overvoltage_exponent=2.0)
    values = crosstalk_values(sipm_a.values, cal, name="x")
    assert values["crosstalk"]["probability"] == round(1 - math.exp(-0.2), 6)
    assert values["crosstalk"]["overvoltage_exponent"] == round(math.log(2) / math.log(1.5), 4)
    assert values["crosstalk"]["model"] == "branching_poisson" and values["name"] == "x"
    assert sipm_a.values["crosstalk"]["probability"] == 0.08 and sipm_a.values["crosstalk"]["model"] == "geometric"


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    make_demo_data.write_demo_data(out)
    return out


def test_spectrum_write_profile_end_to_end(cli, demo, tmp_path, profiles_dir):
    from compensator.physics.sipm import crosstalk_branching_ratio, crosstalk_mean_multiplier, crosstalk_probability
    from compensator.profiles import load_sipm

    truth = json.loads((demo / "truth.json").read_text())["spectra"]
    files = sorted(str(p) for p in (demo / "spectra").glob("ch01_*.csv"))
    out, base = tmp_path / "xt.yaml", profiles_dir / "hut-sipm-a.yaml"
    r = cli("calibrate", "spectrum", *files, "--write-profile", out, "--base", base, "--overvoltage-v",
            *map(str, truth["overvoltages_v"]), "--json")
    assert r.status == 0, r.stderr
    doc = json.loads(r.stdout)
    xt = doc["profile_crosstalk"]
    # The demo spectra were simulated with lambda = 0.08 (V / 3 V)^2: p = 1 - exp(-0.08) = 0.0769 at 3 V.
    assert xt["overvoltage_v"] == 3.0 and xt["n_points"] == 5
    assert xt["crosstalk_branching_ratio"] == pytest.approx(truth["crosstalk_at_3v"],
                                                            abs=3 * xt["crosstalk_branching_ratio_err"])
    assert xt["crosstalk_fraction"] == pytest.approx(1 - math.exp(-xt["crosstalk_branching_ratio"]), rel=1e-5)
    assert xt["crosstalk_overvoltage_exponent"] == pytest.approx(2.0, abs=3 * xt["crosstalk_overvoltage_exponent_err"])
    assert 0 < xt["crosstalk_overvoltage_exponent_err"] < 0.2
    assert doc["written_profile"] == {"file": str(out), "name": "hut-sipm-a-calibrated"}
    prof = load_sipm(out)
    assert prof.values["crosstalk"]["probability"] == pytest.approx(xt["crosstalk_fraction"], abs=1e-6)
    assert prof.device.crosstalk_model == "branching_poisson"
    # The written profile gives back the measured branching ratio at every overvoltage, and its mean avalanches
    # per primary is the Borel mean 1/(1 - lambda) of the simulated law (Vinogradov 2012), within the errors.
    for v in truth["overvoltages_v"]:
        lam = float(crosstalk_branching_ratio(crosstalk_probability(prof.device, v)))
        assert lam == pytest.approx(0.08 * (v / 3) ** 2, rel=0.06)
        assert float(crosstalk_mean_multiplier(prof.device, v)) == pytest.approx(1 / (1 - lam), rel=1e-12)
    text = out.read_text()
    assert "1 - exp(-lambda)" in text and "Vinogradov" in text and "fitted over the spectra" in text
    assert load_sipm(base).values["breakdown"] == prof.values["breakdown"]  # the rest is the base's

    # An existing profile is refused before any fit, and left as it was; --force replaces it.
    before = out.read_bytes()
    again = cli("calibrate", "spectrum", files[2], "--write-profile", out, "--base", base, "--overvoltage-v", "3")
    assert again.status == 2 and "already exists" in again.stderr and again.stdout == "" and out.read_bytes() == before
    # --bias-v and --temp-c: the overvoltage is the bias minus the base's breakdown (24.5 V at 25 C): 2.96 V.
    by_bias = cli("calibrate", "spectrum", files[2], "--write-profile", out, "--base", base, "--bias-v", "27.46",
                  "--temp-c", "25", "--force", "--json")
    by_ov = cli("calibrate", "spectrum", files[2], "--write-profile", tmp_path / "b.yaml", "--base", base,
                "--overvoltage-v", "2.96", "--json")
    a, b = json.loads(by_bias.stdout)["profile_crosstalk"], json.loads(by_ov.stdout)["profile_crosstalk"]
    lam = json.loads(by_ov.stdout)["spectra"][0]["crosstalk_branching_ratio"]
    assert a == b and a["crosstalk_branching_ratio"] == pytest.approx(lam * (3 / 2.96) ** 2, rel=1e-5)
    assert a["crosstalk_overvoltage_exponent"] == 2.0 and a["crosstalk_overvoltage_exponent_err"] is None


@pytest.mark.parametrize("extra, flag", [
    (("--overvoltage-v", "3"), "--write-profile"),  # no --base
    (("--base", "{base}", "--overvoltage-v", "3", "--amplitudes", "free"), "--write-profile"),
    (("--base", "{base}"), "--write-profile"),  # no overvoltage
    (("--base", "{base}", "--bias-v", "27"), "--bias-v"),  # no temperature
    (("--base", "{base}", "--overvoltage-v", "3", "3"), "--overvoltage-v"),  # two values for one file
    (("--base", "{base}", "--bias-v", "24", "--temp-c", "25"), "--bias-v"),  # below breakdown (24.5 V)
])
def test_write_profile_refusals_before_any_fit(cli, demo, tmp_path, profiles_dir, extra, flag):
    out = tmp_path / "x.yaml"
    argv = [a.replace("{base}", str(profiles_dir / "hut-sipm-a.yaml")) for a in extra]
    r = cli("calibrate", "spectrum", demo / "spectra" / "ch01_25C_27.460V.csv", "--write-profile", out, *argv)
    assert r.status == 2 and r.stderr.count("\n") == 1 and flag in r.stderr and r.stdout == "", r.stderr
    assert not out.exists()


def test_profile_options_without_write_profile_and_a_failed_spectrum(cli, demo, tmp_path, profiles_dir):
    r = cli("calibrate", "spectrum", demo / "spectra" / "ch01_25C_27.460V.csv", "--overvoltage-v", "3")
    assert r.status == 2 and "--overvoltage-v: applies only with --write-profile" in r.stderr
    flat = tmp_path / "flat.csv"
    flat.write_text("charge,counts\n" + "".join(f"{0.01 * i:.2f},100\n" for i in range(200)))
    out = tmp_path / "x.yaml"
    r = cli("calibrate", "spectrum", demo / "spectra" / "ch01_25C_27.460V.csv", flat, "--write-profile", out,
            "--base", profiles_dir / "hut-sipm-a.yaml", "--overvoltage-v", "3", "--json")
    # One spectrum could not be fitted: a profile from the other alone would hide it; exit 1, nothing written.
    assert r.status == 1 and "not written: 1 of 2 spectra could not be fitted" in r.stderr and not out.exists()
    doc = json.loads(r.stdout)
    assert doc["written_profile"] is None and doc["profile_crosstalk"] is None
    assert doc["spectra"][0]["crosstalk_branching_ratio"] == pytest.approx(0.08, abs=0.005)


@pytest.mark.parametrize("kwargs, key, fragment", [
    ({"branching_ratio": [0.0]}, "branching_ratio", "a branching ratio of 0 measures no crosstalk"),
    ({"branching_ratio": [1.0]}, "branching_ratio", "a branching ratio of 1 measures no crosstalk"),
    ({"branching_ratio": [-0.1]}, "branching_ratio", "a branching ratio of -0.1 measures no crosstalk of the model "
                                                     "(it must lie between 0 and 1)"),
    ({"branching_ratio": [1.5]}, "branching_ratio", "a branching ratio of 1.5 measures"),
    ({"branching_ratio": [0.5, 1.2], "overvoltage_v": [3.0, 3.0], "branching_ratio_err": [0.01, 0.01]},
     "branching_ratio", "a branching ratio of 1.2 measures"),  # the first bad one is named
    ({"overvoltage_v": [0.5, -1.0], "branching_ratio": [0.1, 0.1], "branching_ratio_err": [0.01, 0.01]},
     "overvoltage_v", "overvoltages must be positive, got -1 V"),
    ({"branching_ratio_err": [0.01, 0.02]}, "branching_ratio",
     "one branching ratio, error and overvoltage per spectrum (got 1, 2, 1)"),
    ({"branching_ratio_err": [np.inf]}, "branching_ratio_err", "branching-ratio errors must be finite and positive"),
    ({"overvoltage_v": [0.0]}, "overvoltage_v", "overvoltages must be positive, got 0 V"),
    ({"ref_overvoltage_v": 0.0}, "ref_overvoltage_v", "must be positive, got 0.0"),
    ({"ref_overvoltage_v": np.inf}, "ref_overvoltage_v", "must be positive, got inf"),
    # 0.5 at 2 V scaled to 3 V with n = 2 is 1.125: beyond the branching model
    ({"branching_ratio": [0.5], "overvoltage_v": [2.0]}, "branching_ratio",
     "the branching ratio at the reference overvoltage 3 V comes out at 1.125, outside the model's range (0 to 1)"),
])
def test_refusals_say_why(kwargs, key, fragment):
    args = {"branching_ratio": [0.1], "overvoltage_v": [3.0], "branching_ratio_err": [0.01], "ref_overvoltage_v": 3.0,
            "overvoltage_exponent": 2.0} | kwargs
    with pytest.raises(ModelError) as exc:
        calibrate_crosstalk(args.pop("branching_ratio"), args.pop("overvoltage_v"), **args)
    assert exc.value.key == key and exc.value.reason.startswith(fragment), exc.value.reason


def test_small_overvoltages_and_a_scattered_fit():
    # Overvoltages below 1 V are accepted; 2.0 and 2.3 V are two overvoltages (the exponent is fitted); with more
    # scatter than the errors claim, the errors are scaled by sqrt(chi2/ndf) as scipy.optimize.curve_fit does
    # without absolute_sigma.
    from scipy.optimize import curve_fit

    low = calibrate_crosstalk([0.01], [0.5], branching_ratio_err=[0.001], ref_overvoltage_v=0.8,
                              overvoltage_exponent=2.0)
    assert low.branching_ratio_at_ref == pytest.approx(0.01 * (0.8 / 0.5) ** 2, rel=1e-12)
    two = calibrate_crosstalk([0.05, 0.07], [2.0, 2.3], branching_ratio_err=[0.001, 0.001], ref_overvoltage_v=3.0,
                              overvoltage_exponent=9.0)
    assert two.exponent_fitted and two.overvoltage_exponent == pytest.approx(math.log(1.4) / math.log(1.15), rel=1e-9)
    ov = np.array([2.0, 2.5, 3.0, 3.5, 4.0])
    lam = 0.08 * (ov / 3.0) ** 2 * np.array([1.05, 0.96, 1.02, 0.97, 1.04])
    cal = calibrate_crosstalk(lam, ov, branching_ratio_err=0.002 * lam, ref_overvoltage_v=3.0, overvoltage_exponent=2.0)
    x, y = np.log(ov / 3.0), np.log(lam)
    popt, pcov = curve_fit(lambda x, a, n: a + n * x, x, y, sigma=np.full(5, 0.002), absolute_sigma=False)
    assert cal.chi2 / cal.ndf > 1 and cal.overvoltage_exponent == pytest.approx(popt[1], rel=1e-9)
    assert cal.overvoltage_exponent_err == pytest.approx(math.sqrt(pcov[1, 1]), rel=1e-6)
    assert cal.branching_ratio_err_at_ref == pytest.approx(math.exp(popt[0]) * math.sqrt(pcov[0, 0]), rel=1e-6)


def test_profile_values_at_another_reference(sipm_a):
    cal = calibrate_crosstalk([0.1], [2.5], branching_ratio_err=[0.01], ref_overvoltage_v=2.5, overvoltage_exponent=2.0)
    values = crosstalk_values(sipm_a.values, cal)
    assert values["crosstalk"]["ref_overvoltage_v"] == 2.5 and values["name"] == "hut-sipm-a-calibrated"
    assert values["description"] == "hut-sipm-a with crosstalk calibrated from charge spectra"
    assert values["crosstalk"]["overvoltage_exponent"] == sipm_a.values["crosstalk"]["overvoltage_exponent"]
