"""calibration.iv: checks added for mutation testing (each against a hand calculation or the exact refusal)."""

import numpy as np
import pytest
from iv_model import joint_model_residuals
from scipy.optimize import least_squares
from scipy.signal import savgol_filter

from compensator.calibration import iv

# A numpy RuntimeWarning (a division by zero, the root of a negative number) would reach the command line's user:
# the analysis keeps them inside, and every check here fails on one.
pytestmark = pytest.mark.filterwarnings("error::RuntimeWarning")


def test_check_curve_names_each_defect_exactly():
    bias_v = np.linspace(20.0, 30.0, 20)
    current_a = np.full(20, 1e-9)
    assert iv.check_curve(bias_v, current_a) == ""
    assert iv.check_curve(bias_v[::-1], current_a) == ""  # a downward sweep is fine
    assert iv.check_curve(bias_v, current_a[:-1]) == "bias and current columns differ in length"
    assert iv.check_curve(bias_v[:14], current_a[:14]) == "too few points (14; need at least 15)"
    assert iv.check_curve(bias_v[:15], current_a[:15]) == ""  # 15 points are enough
    bad = current_a.copy()
    bad[3] = np.inf
    assert iv.check_curve(bias_v, bad) == "non-finite bias or current values"
    back = bias_v.copy()
    back[5] = back[4]  # repeats at 22.1053 V (20 + 4 x 10/19)
    assert iv.check_curve(back, current_a) == ("bias is not strictly monotonic (sweep reverses or repeats at "
                                               "22.11 V)")
    neg = current_a.copy()
    neg[[2, 7]] = [0.0, -1e-9]  # first at 20 + 2 x 10/19 = 21.05 V
    assert iv.check_curve(bias_v, neg) == ("2 current value(s) are zero or negative (first at 21.05 V); give the "
                                           "reverse current as a positive magnitude")


def test_check_curve_names_where_a_sweep_reverses():
    # The first step sets the direction; the reason names the bias after the first step against it.
    down = np.linspace(30.0, 20.0, 20)  # steps of -10/19 V
    current_a = np.full(20, 1e-9)
    assert iv.check_curve(down, current_a) == ""
    back = down.copy()
    back[6] = back[4]  # 30 - 4 x 10/19 = 27.89 V again: the step to index 6 goes up
    assert iv.check_curve(back, current_a) == ("bias is not strictly monotonic (sweep reverses or repeats at "
                                               "27.89 V)")
    repeat = down.copy()
    repeat[9] = repeat[8]  # a repeat in a downward sweep: 30 - 8 x 10/19 = 25.79 V
    assert iv.check_curve(repeat, current_a) == ("bias is not strictly monotonic (sweep reverses or repeats at "
                                                 "25.79 V)")
    first = np.concatenate(([20.0, 19.9], np.linspace(20.1, 22.0, 18)))  # the very first step goes back
    assert iv.check_curve(first, current_a) == ("bias is not strictly monotonic (sweep reverses or repeats at "
                                                "20.1 V)")
    flat = np.full(20, 25.0)
    assert iv.check_curve(flat, current_a) == "bias is not strictly monotonic (sweep reverses or repeats at 25 V)"


def power_law_a(bias_v, breakdown_v):
    """Exponential leakage plus a power law of exponent 2 (the docstring example of find_breakdown)."""
    x = np.clip(bias_v - breakdown_v, 0.0, None)
    return 1e-11 * np.exp(0.1 * (bias_v - breakdown_v)) + 1e-6 * x ** 2


GRID_V = np.arange(20.0, 30.0, 0.05)


def test_each_curve_on_its_own_grid_up_or_down():
    # Noise-free curves of the joint fit's own model: it returns the generating breakdown to 1 uV. Each curve
    # has its own bias row: the first upward, the second 13 mV higher and swept downward; a third row with a
    # zero current is refused without stopping the analysis of the rows after it.
    up, down = GRID_V, (GRID_V + 0.013)[::-1]
    bias = np.vstack([GRID_V, up, down])
    bad = power_law_a(GRID_V, 24.5)
    bad[10] = 0.0  # at 20.5 V
    current = np.vstack([bad, power_law_a(up, 24.5), power_law_a(down, 24.8)])
    r = iv.find_breakdown(bias, current)
    assert r.reason == ("1 current value(s) are zero or negative (first at 20.5 V); give the reverse current as a "
                        "positive magnitude", "", "")
    assert r.breakdown_v[1:] == pytest.approx([24.5, 24.8], abs=1e-6) and np.isnan(r.breakdown_v[0])
    assert r.bias_v[2, 0] == pytest.approx(20.013, abs=1e-12)  # analysed upward on its own grid


def test_a_shared_grid_swept_downward():
    current = np.vstack([power_law_a(GRID_V, 24.5), power_law_a(GRID_V, 24.8)])
    r = iv.find_breakdown(GRID_V[::-1], current[:, ::-1])
    assert r.breakdown_v == pytest.approx([24.5, 24.8], abs=1e-6) and r.reason == ("", "")
    assert r.bias_v[0, 0] == pytest.approx(20.0, abs=1e-12)


@pytest.mark.parametrize("call, key, reason", [
    (lambda: iv.find_breakdown(GRID_V, power_law_a(GRID_V, 24.5), "knee"), "method",
     "method must be one of inverse-log-derivative, log-derivative-peak, second-derivative; got 'knee'"),
    (lambda: iv.find_breakdown(GRID_V, np.ones((1, 1, 200))), "current_a",
     "current_a must be 1-D or 2-D (curves x points)"),
    (lambda: iv.find_breakdown(GRID_V[:150], np.ones(200)), "bias_v", "bias_v has 150 points but current_a has 200"),
    (lambda: iv.find_breakdown(np.ones((3, 200)), np.ones((2, 200))), "bias_v",
     "bias_v shape (3, 200) does not match current_a shape (2, 200)"),
])
def test_find_breakdown_refusals_name_their_key(call, key, reason):
    from compensator.errors import ModelError

    with pytest.raises(ModelError) as exc:
        call()
    assert (exc.value.key, exc.value.reason) == (key, reason)


def test_result_arrays_have_their_documented_types():
    # IvBreakdown's docstring: window_points and leakage_points of int, leakage_limited and joint_fit of bool,
    # for analysed and for refused curves alike.
    current = np.vstack([power_law_a(GRID_V, 24.5), np.full(GRID_V.size, -1.0)])
    r = iv.find_breakdown(GRID_V, current)
    assert r.ok.tolist() == [True, False]
    for name in ("window_points", "leakage_points"):
        assert getattr(r, name).dtype.kind == "i", name
    for name in ("leakage_limited", "joint_fit"):
        assert getattr(r, name).dtype == np.bool_, name
    assert r.joint_fit.tolist() == [True, False] and r.leakage_limited[1] == False  # noqa: E712


def test_a_curve_too_short_below_breakdown_for_a_leakage_model():
    # Breakdown 0.8 V after the start of the sweep: fewer than MIN_LEAKAGE_POINTS points lie a gap and a window
    # below the knee, so the leakage is not modelled (0 points, NaN slope and current, as documented) and the
    # curve is still analysed by the derivative method alone, whose smoothing leaves 4.4 mV here (measured;
    # 4.3 mV on the same curve shape with a modelled leakage and joint_fit=False).
    r = iv.find_breakdown(GRID_V, power_law_a(GRID_V, 20.8))
    assert r.ok.all() and r.leakage_points[0] == 0
    assert np.isnan(r.leakage_slope_per_v[0]) and np.isnan(r.leakage_current_a[0])
    assert r.breakdown_v[0] == pytest.approx(20.8, abs=0.005)


def test_a_zero_current_on_a_shared_grid_is_named():
    current = np.vstack([power_law_a(GRID_V, 24.5), power_law_a(GRID_V, 24.5)])
    current[1, 4] = 0.0  # at 20.2 V
    r = iv.find_breakdown(GRID_V, current)
    assert r.reason[1] == ("1 current value(s) are zero or negative (first at 20.2 V); give the reverse current as "
                           "a positive magnitude")
    assert r.reason[0] == "" and r.breakdown_v[0] == pytest.approx(24.5, abs=1e-6)


@pytest.mark.parametrize("method, joint_fit", [("inverse-log-derivative", False), ("log-derivative-peak", True),
                                               ("second-derivative", True)])
def test_leakage_current_at_each_methods_breakdown(method, joint_fit):
    # Below breakdown the curve is exactly 1e-11 exp(0.1 (V - 24.5)) A, so the straight line through ln I is
    # exact, and the leakage at the breakdown a method reports is that exponential there.
    r = iv.find_breakdown(GRID_V, power_law_a(GRID_V, 24.5), method, joint_fit=joint_fit)
    assert r.ok.all() and r.leakage_slope_per_v[0] == pytest.approx(0.1, rel=1e-6)
    # abs=0: approx's default absolute slack of 1e-12 A would be 10 % of this current
    assert r.leakage_current_a[0] == pytest.approx(1e-11 * np.exp(0.1 * (r.breakdown_v[0] - 24.5)), rel=1e-6, abs=0)


def test_a_curve_without_a_breakdown_is_refused_with_its_rise():
    # The current rises 1.5-fold from 20 V to 29.95 V: less than MIN_CURRENT_RATIO (20). Nothing of a refused
    # curve is reported, and its flags are down.
    current = np.vstack([power_law_a(GRID_V, 24.5), 1e-9 * (1.0 + 0.5 * (GRID_V - 20.0) / 9.95)])
    r = iv.find_breakdown(GRID_V, current)
    assert r.reason[1] == "no breakdown in range: the current rises only 1.5-fold between 20 V and 29.95 V"
    assert r.joint_fit.tolist() == [True, False] and not r.leakage_limited[1]
    assert all(np.isnan(getattr(r, name)[1]) for name in iv._FLOAT_FIELDS)


@pytest.mark.parametrize("slope_per_v", [0.5, 1.0])
def test_peak_method_keeps_the_leakage_level_at_the_knee_and_removes_its_growth(slope_per_v):
    # For I = I0 + A x^k the maximum of d ln I/dV lies at x* = ((k - 1) I0 / A)^(1/k) above breakdown (set the
    # derivative of A k x^(k-1) / (I0 + A x^k) to zero; derived here). With an exponential leakage the peak
    # method removes its growth and keeps its level at the knee (the peak of the smoothed d ln I/dV, here from
    # ivknee, pinned against scipy in tests/test_calibration_ivknee_mutation.py), so the peak is x* with
    # I0 = I_leak(V_knee); within the method's 2 mV on a 10 mV grid (tests/test_calibration_iv.py).
    from compensator.calibration.ivknee import _knee
    from compensator.calibration.synthetic import iv_current_a

    grid = np.round(np.arange(22.0, 28.0001, 0.01), 4)
    current = iv_current_a(grid, 24.5, exponent=2.0, avalanche_a=1e-6, leakage_a=1e-8,
                           leakage_slope_per_v=slope_per_v)
    r = iv.find_breakdown(grid, current, "log-derivative-peak")
    knee_v = grid[_knee(np.log(current)[None, :], 0.01).peak_index[0]]
    i0 = 1e-8 * np.exp(slope_per_v * (knee_v - 24.5))
    assert r.breakdown_v[0] == pytest.approx(24.5 + np.sqrt(i0 / 1e-6), abs=0.002)


def test_log_derivative_is_the_smoothed_derivative_of_the_total_current():
    # IvBreakdown's docstring: log_derivative_per_v is the smoothed d ln I/dV of the total current with the
    # curve's own window (window_points), NaN within half a window of the ends and over a curve that failed
    # early; scipy.signal.savgol_filter (cubic, ends "nearest") on the same ln I, for the default method.
    rng = np.random.default_rng(3)
    good = power_law_a(GRID_V, 24.5) * np.exp(0.01 * rng.standard_normal(GRID_V.size))
    r = iv.find_breakdown(GRID_V, np.vstack([good, np.full(GRID_V.size, -1.0)]))
    d = r.log_derivative_per_v
    assert r.ok.tolist() == [True, False] and d.dtype == np.float64 and d.shape == (2, GRID_V.size)
    np.testing.assert_array_equal(r.bias_v[0], GRID_V)
    w = int(r.window_points[0])
    h = w // 2
    ref = savgol_filter(np.log(good), w, 3, deriv=1, delta=GRID_V[1] - GRID_V[0], mode="nearest")
    np.testing.assert_allclose(d[0, h:-h], ref[h:-h], rtol=1e-9, atol=0)
    assert np.isnan(d[0, :h]).all() and np.isnan(d[0, -h:]).all() and np.isnan(d[1]).all()


def test_default_method_reports_the_joint_fits_leakage():
    # With the joint fit (the default), the leakage at the breakdown is the joint fit's own exp(a), not the line
    # through ln I below the knee extrapolated to it. A leakage whose logarithm bends (0.05 / V^2) makes the two
    # differ by 17 %: scipy.optimize.least_squares (MINPACK's Levenberg-Marquardt) on the joint model
    # (tests/iv_model.py) over the documented window, 3 V below to 2 V above the derivative method's breakdown,
    # from the reported optimum, gives the same leakage to 1e-3 (its convergence, as in
    # tests/test_calibration_ivjoint_mutation.py).
    from compensator.calibration.synthetic import iv_current_a

    grid = np.round(np.arange(20.0, 31.0001, 0.05), 4)
    rng = np.random.default_rng(5)
    leak = 2e-8 * np.exp(0.5 * (grid - 24.5) + 0.05 * (grid - 24.5) ** 2)
    current = (iv_current_a(grid, 24.5, leakage_a=1e-30) + leak) * np.exp(0.002 * rng.standard_normal(grid.size))
    r = iv.find_breakdown(grid, current)
    r0 = iv.find_breakdown(grid, current, joint_fit=False)
    assert r.joint_fit.all() and not r0.joint_fit.any()
    inside = (grid >= r0.breakdown_v[0] - 3.0) & (grid <= r0.breakdown_v[0] + 2.0)
    theta = np.array([r.breakdown_v[0], np.log(1e-6), r.exponent[0], 0.0, np.log(r.leakage_current_a[0]),
                      r.leakage_slope_per_v[0]])
    ref = least_squares(joint_model_residuals, theta, method="lm", xtol=1e-12, ftol=1e-12,
                        args=(grid[inside], np.log(current[inside])))
    assert r.breakdown_v[0] == pytest.approx(ref.x[0], abs=2e-5)
    assert r.leakage_current_a[0] == pytest.approx(np.exp(ref.x[4]), rel=1e-3, abs=0)
    line = r0.leakage_current_a[0] * np.exp(r0.leakage_slope_per_v[0] * (r.breakdown_v[0] - r0.breakdown_v[0]))
    assert abs(r.leakage_current_a[0] / line - 1.0) > 0.1


def test_short_window_of_an_odd_span_keeps_the_whole_points_of_its_half(monkeypatch):
    # On a 30 mV grid the full window spans ceil(2 V / 0.03 V) = 67 points (odd); the short window for the
    # systematic part spans half of it in whole points, int(33.5) = 33 (ILD_SHORT_FRACTION; more than a window
    # + 3 points here): the masks handed to the root fit hold 67 and 33 points (every D > 0 on this curve).
    calls = []
    real = iv._ild_root

    def spy(x, inv, weights, mask):
        calls.append(mask.copy())
        return real(x, inv, weights, mask)

    monkeypatch.setattr(iv, "_ild_root", spy)
    grid = np.round(np.arange(20.0, 30.0001, 0.03), 4)
    rng = np.random.default_rng(2)
    r = iv.find_breakdown(grid, power_law_a(grid, 24.5) * np.exp(0.002 * rng.standard_normal(grid.size)),
                          joint_fit=False)
    assert r.ok.all() and r.window_points[0] + 3 < 33
    assert [int(m[0].sum()) for m in calls[:2]] == [67, 33]
