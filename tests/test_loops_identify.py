"""Identification: Smith's two points, least squares, relay experiments, CSV problems."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pytest

from compensator.errors import InputError, ModelError
from compensator.loops import identify, plants
from compensator.loops.measurements import LoopRecord, read_loop_csv

TOOLS = Path(__file__).resolve().parent.parent / "tools" / "make_loop_data.py"


@pytest.fixture(scope="module")
def loop_data():
    spec = importlib.util.spec_from_file_location("make_loop_data", TOOLS)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _fopdt_record(k, tau, theta, rate_hz, step_time=5.0, duration=200.0, noise=0.0, seed=1):
    t = np.arange(int(duration * rate_hz) + 1) / rate_hz
    u = np.where(t >= step_time, 1.0, 0.0)
    y = 3.0 + k * -np.expm1(-np.clip(t - step_time - theta, 0, None) / tau)
    y = y + noise * np.random.default_rng(seed).standard_normal(t.size)
    return LoopRecord(t, u, y, "synthetic")


def test_smith_two_point_is_exact_on_a_true_fopdt():
    # Smith (1972): tau = 1.5 (t63.2 - t28.3), theta = t63.2 - tau, exact for a FOPDT.
    k, tau, theta = -2.0, 12.0, 1.7
    t = np.linspace(0, 150, 150001)
    y = k * -np.expm1(-np.clip(t - theta, 0, None) / tau)
    m = identify.smith_two_point(t, y, 0.0, 0.0, k, 1.0)
    assert m.gain == k
    assert m.time_constant_s == pytest.approx(tau, rel=1e-5)
    assert m.dead_time_s == pytest.approx(theta, abs=1e-4)
    # 63.2 % and 28.3 % are 1 - exp(-1) and 1 - exp(-1/3), to the rounding of the published levels.
    assert identify.SMITH_HIGH == pytest.approx(1 - np.exp(-1), abs=5e-4)
    assert identify.SMITH_LOW == pytest.approx(1 - np.exp(-1 / 3), abs=5e-4)


def test_least_squares_recovers_a_noisy_fopdt(loop_data, tmp_path):
    path = tmp_path / "fopdt.csv"
    *_, truth = loop_data.make_fopdt_step(path)
    fit = identify.fit_step(read_loop_csv(path), "fopdt")
    m = fit.model
    for key in ("gain", "time_constant_s", "dead_time_s"):
        # Within four standard errors of the truth, and the errors are small.
        assert abs(getattr(m, key) - truth[key]) < 4 * fit.standard_errors[key] + 1e-9, key
        assert fit.standard_errors[key] < 0.01 * abs(truth[key]) + 0.02
    assert fit.r_squared > 0.999 and fit.warnings == ()


def test_sopdt_fit_recovers_two_time_constants():
    p = plants.sopdt_plant(1.5, 20.0, 6.0, 2.0)
    t = np.arange(0, 300, 0.1)
    u = (t >= 10).astype(float)
    y = 5.0 + plants.step_response(p, t - 10)
    fit = identify.fit_step(LoopRecord(t, u, y, "sopdt"), "sopdt")
    m = fit.model
    assert m.gain == pytest.approx(1.5, rel=1e-4)
    assert m.time_constant_s == pytest.approx(20.0, rel=1e-3)
    assert m.time_constant2_s == pytest.approx(6.0, rel=1e-3)
    assert m.dead_time_s == pytest.approx(2.0, abs=5e-3)


def test_fit_handles_a_multi_step_input():
    # Superposition: the input goes up, then down to a different level.
    rate = 10.0
    t = np.arange(0, 400, 1 / rate)
    u = np.where(t >= 10, 1.0, 0.0) - np.where(t >= 150, 0.4, 0.0)
    p = plants.fopdt_plant(3.0, 15.0, 2.5)
    y = plants.step_response(p, t - 10) - 0.4 * plants.step_response(p, t - 150)
    fit = identify.fit_step(LoopRecord(t, u, y, "two steps"), "fopdt")
    assert fit.model.gain == pytest.approx(3.0, rel=1e-6)
    assert fit.model.time_constant_s == pytest.approx(15.0, rel=1e-5)


def test_cooler_step_fit_gain_matches_the_model_truth(loop_data, tmp_path):
    path = tmp_path / "step.csv"
    *_, truth = loop_data.make_step(path)
    fit = identify.fit_step(read_loop_csv(path), "fopdt")
    # A FOPDT is an approximation of the three-state cooler: the gain within 2 %.
    assert fit.model.gain == pytest.approx(truth["gain_k_per_a"], rel=0.02)


def test_relay_formula_on_an_ideal_limit_cycle():
    # Ku = 4 d / (pi a) (Astrom and Hagglund, Automatica 20, 645, 1984), with a clean sine and square wave.
    t = np.arange(0, 100, 0.01)
    period, a, d = 8.0, 0.25, 0.6
    y = a * np.sin(2 * np.pi * t / period)
    u = np.where(y >= 0, d, -d) + 1.0
    r = identify.relay_experiment(LoopRecord(t, u, y, "ideal"))
    assert r.ultimate_period_s == pytest.approx(period, rel=1e-3)
    assert r.oscillation_amplitude == pytest.approx(a, rel=1e-4)
    assert r.ultimate_gain == pytest.approx(4 * d / (np.pi * a), rel=1e-4)
    h = identify.relay_experiment(LoopRecord(t, u, y, "ideal"), hysteresis=0.1)
    assert h.ultimate_gain == pytest.approx(4 * d / (np.pi * np.sqrt(a * a - 0.01)), rel=1e-4)


def test_relay_on_the_demo_cooler_is_near_the_model_ultimate_point(loop_data, tmp_path):
    path = tmp_path / "relay.csv"
    *_, truth = loop_data.make_relay(path)
    r = identify.relay_experiment(read_loop_csv(path))
    # The describing function's own error, about 2.5 % here (the truth has the relay's half-sample timing).
    assert r.ultimate_gain == pytest.approx(truth["ultimate_gain"], rel=0.025)
    assert r.ultimate_period_s == pytest.approx(truth["ultimate_period_s"], rel=0.025)
    assert r.cycles >= 10 and r.process_sign == -1  # the cooler is reverse acting
    # The stated error indicator: peak-based Ku against the fundamental's, recomputed here.
    assert r.describing_function_error_pct == pytest.approx(
        100 * abs(r.ultimate_gain / r.fundamental_ultimate_gain - 1), rel=1e-9)
    assert r.describing_function_error_pct < 2.5


def test_relay_sign_of_a_direct_acting_process_and_a_non_finite_record():
    t = np.arange(0, 100, 0.01)
    y = 0.25 * np.sin(2 * np.pi * t / 8.0)
    direct = identify.relay_experiment(LoopRecord(t, np.where(y <= 0, 1.0, -1.0), y, "direct"))
    assert direct.process_sign == 1 and direct.signed_ultimate_gain > 0
    bad = y.copy()
    bad[5000] = np.inf
    with pytest.raises(ModelError, match="no finite ultimate gain"):
        identify.relay_experiment(LoopRecord(t, np.where(y <= 0, 1.0, -1.0), bad, "inf"))


def test_lack_of_fit_factor_against_the_ar1_formula():
    # White residuals: factor 1 (to sampling error); AR(1) with rho = 0.8: sqrt(1.8 / 0.2) = 3 (common practice).
    rng = np.random.default_rng(7)
    e = rng.standard_normal(200000)
    assert identify.lack_of_fit_factor(e) == pytest.approx(1.0, abs=0.01)
    ar = np.empty_like(e)
    ar[0] = e[0]
    for k in range(1, e.size):
        ar[k] = 0.8 * ar[k - 1] + e[k]
    assert identify.lack_of_fit_factor(ar) == pytest.approx(3.0, rel=0.02)


def test_step_fit_errors_grow_with_lack_of_fit(loop_data, tmp_path):
    # A FOPDT misses part of the three-state cooler: the residuals are correlated and the errors scaled up,
    # so the scaled gain error covers the truth.
    path = tmp_path / "step.csv"
    *_, truth = loop_data.make_step(path)
    fit = identify.fit_step(read_loop_csv(path), "fopdt")
    assert fit.standard_error_scale > 2
    white = tmp_path / "white.csv"
    loop_data.make_fopdt_step(white)
    assert identify.fit_step(read_loop_csv(white), "fopdt").standard_error_scale < 1.1  # a true FOPDT plus white noise


def test_relay_and_step_input_problems():
    t = np.arange(0, 50, 0.1)
    with pytest.raises(ModelError, match="two input levels"):
        identify.relay_experiment(LoopRecord(t, np.sin(t), np.sin(t), "x"))
    with pytest.raises(ModelError, match="never changes"):
        identify.fit_step(LoopRecord(t, np.ones_like(t), t, "x"))


def test_approximate_plant_returns_a_fopdt_unchanged():
    m = identify.approximate_plant(plants.fopdt_plant(-4.0, 25.0, 1.5))
    assert (m.gain, m.time_constant_s, m.dead_time_s) == pytest.approx((-4.0, 25.0, 1.5), rel=2e-4)


@pytest.mark.parametrize("text, line, key, reason", [
    ("", 0, "", "empty file"),
    ("time_s,input\n1,2\n", 1, "output", "missing column"),
    ("# c\ntime_s,input,output\n" + "".join(f"{i},0,0\n" for i in range(12)) + "12,x,1\n", 15, "input",
     "not a number"),
    ("time_s,input,output\n" + "".join(f"{i},0,0\n" for i in range(12)) + "11,0,1\n", 14, "time_s",
     "increase strictly"),
    ("time_s,input,output\n" + "".join(f"{i},0,0\n" for i in range(12)) + "12,0,nan\n", 14, "output", "finite"),
    ("time_s,input,output\n1,0,0\n2,0,0\n", 1, "", "at least 10"),
    ("time_s,input,output\n" + "".join(f"{i},0,0\n" for i in range(12)) + "12,0\n", 14, "output", "cells"),
])
def test_csv_problems_name_file_line_and_column(tmp_path, text, line, key, reason):
    path = tmp_path / "bad.csv"
    path.write_text(text)
    with pytest.raises(InputError) as info:
        read_loop_csv(path)
    (problem,) = info.value.problems
    assert (problem.file, problem.line, problem.key) == (str(path), line, key)
    assert reason in problem.reason


def test_missing_file(tmp_path):
    with pytest.raises(InputError, match="no such file"):
        read_loop_csv(tmp_path / "none.csv")
