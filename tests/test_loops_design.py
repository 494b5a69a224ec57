"""loops.design: one call per loop kind, checked against the published rules and independent computations."""

from __future__ import annotations

import math

import numpy as np
import pytest

from compensator.errors import ModelError
from compensator.loops import design, plants, tuning
from compensator.loops.verify import PidGains


def _magnus_dew_point_c(temp_c, rh_pct):
    # Magnus formula with the constants of Alduchov and Eskridge (1996): a = 17.625, b = 243.04 C.
    g = math.log(rh_pct / 100.0) + 17.625 * temp_c / (243.04 + temp_c)
    return 243.04 * g / (17.625 - g)


def test_model_loop_by_simc_is_skogestad_2003_with_the_sampling_delay():
    # K = 2, tau = 30 s, theta = 5 s at 10 Hz: the rule sees theta + 1.5 T = 5.15 s; tau_c = theta.
    d = design.design_model_loop(plants.FopdtModel(2.0, 30.0, 5.0), rate_hz=10.0, method="simc")
    theta = 5.0 + 1.5 * 0.1
    kc = 30.0 / (2.0 * (theta + theta))
    assert d.gains.kp == pytest.approx(kc, rel=1e-12)
    assert d.gains.ki_per_s == pytest.approx(kc / min(30.0, 4.0 * 2 * theta), rel=1e-12)
    assert d.kind == "fopdt" and d.sample_time_s == 0.1 and d.tuning.method == "simc"
    assert d.units.kp_unit == "input unit/output unit" and d.units.ki_unit == "input unit/(output unit s)"
    assert d.units.kd_unit == "input unit s/output unit"
    assert d.ok and d.report.stable and d.ambient is None and d.conditions is None
    sopdt = design.design_model_loop(plants.SopdtModel(2.0, 30.0, 3.0, 5.0), rate_hz=10.0, method="amigo")
    assert sopdt.kind == "sopdt"
    assert design.design_model_loop(plants.FopdtModel(2.0, 30.0, 5.0), rate_hz=10.0, method="simc",
                                    kind="ultimate").kind == "ultimate"


def test_verifying_given_gains_tunes_nothing_and_judges_them():
    model = plants.FopdtModel(2.0, 30.0, 5.0)
    good = design.design_model_loop(model, rate_hz=10.0, gains=PidGains(1.4, 0.05))
    assert good.tuning is None and good.gains == PidGains(1.4, 0.05) and good.ok
    assert good.report.margins.ms == pytest.approx(1.57, abs=0.005)  # as in verify_loop's own example
    # Ziegler-Nichols' ultimate gain of this loop doubled: unstable, not ok, and said so.
    ku, _ = tuning.ultimate_point(plants.model_plant(model), 0.1)
    bad = design.design_model_loop(model, rate_hz=10.0, gains=PidGains(2.0 * ku, 0.05))
    assert not bad.ok and not bad.report.stable
    assert "unstable" in {f.code for f in bad.findings}


def test_robust_model_loop_holds_its_bound_and_ok_follows_it():
    d = design.design_model_loop(plants.FopdtModel(2.0, 30.0, 5.0), rate_hz=10.0, method="robust", ms_max=1.6)
    assert d.report.margins.ms <= 1.6 * 1.005 and d.ok and d.tuning.ms_target == 1.6


def test_rate_must_be_positive_and_finite():
    for rate in (0.0, -1.0, float("nan"), float("inf"), None):
        with pytest.raises(ModelError) as info:
            design.design_model_loop(plants.FopdtModel(2.0, 30.0, 5.0), rate_hz=rate, method="simc")
        assert info.value.key == "rate_hz"


def test_cooler_over_the_ambient_range_reports_dew_points_by_magnus(cooler):
    params = cooler.cooler
    d = design.design_cooler_loop(params, method="simc", ambient_range_c=(-25.0, 45.0))
    # The range in five steps plus the nominal ambient (25 C is one of the steps here).
    assert [c.ambient_temp_c for c in d.ambient] == [-25.0, -7.5, 10.0, 25.0, 27.5, 45.0]
    for check in d.ambient:
        assert check.dew_point_c == pytest.approx(_magnus_dew_point_c(check.ambient_temp_c, 50.0), abs=1e-9)
    assert d.conditions.dew_point_c == pytest.approx(13.86, abs=0.01)  # 25 C at 50 % RH (computed)
    assert d.conditions.relative_humidity_pct == 50.0 and d.conditions.dew_margin_k == 3.0
    assert d.kind == "thermal" and d.units.kp_unit == "A/K" and d.units.ki_unit == "A/(K s)"
    # At 45 C and 50 % RH the dew point (32.2 C) lies above the 20 C setpoint: condensation is a danger.
    assert [c.condensation for c in d.ambient] == [False, False, False, False, False, True]
    assert [f.severity.value for f in d.findings if f.code == "condensation_risk"] == ["danger"]
    # A drier range: the dew point follows the humidity given.
    dry = design.design_cooler_loop(params, method="simc", relative_humidity_pct=20.0)
    assert dry.conditions.dew_point_c == pytest.approx(_magnus_dew_point_c(25.0, 20.0), abs=1e-9)


def test_robust_cooler_holds_the_bound_at_every_ambient(cooler):
    d = design.design_cooler_loop(cooler.cooler, method="robust", ambient_range_c=(-25.0, 45.0))
    assert d.ambient.worst_ms <= 1.4 * 1.005
    assert all(c.stable and c.ms <= 1.4 * 1.005 for c in d.ambient)
    assert d.ok == (d.report.margins.ms <= 1.4 * 1.005 and d.ambient.ok)


def test_cooler_ranges_must_be_finite_and_humidity_valid(cooler):
    with pytest.raises(ModelError) as info:
        design.design_cooler_loop(cooler.cooler, method="simc", ambient_range_c=(float("nan"), 45.0))
    assert info.value.key == "ambient_range_c"
    with pytest.raises(ModelError) as info:
        design.design_cooler_loop(cooler.cooler, method="simc", relative_humidity_pct=0.0)
    assert info.value.key == "relative_humidity_pct"


def test_bias_loop_needs_a_read_back_channel(board_ntc, board_pt1000):
    with pytest.raises(ModelError) as info:
        design.design_bias_loop(board_pt1000, method="simc")
    assert info.value.key == "bias_readback" and "open-loop" in info.value.reason
    d = design.design_bias_loop(board_ntc, method="robust")
    assert d.kind == "board" and d.units.kp_unit == "DAC code/V" and d.ok
    assert d.sample_time_s == pytest.approx(1.0 / board_ntc.control_rate_hz)


def test_ultimate_loop_without_a_model_by_ziegler_nichols_1942_and_the_ms_circle():
    ku, pu = -2.5, 7.0
    zn = design.design_ultimate_loop(ku, pu, rate_hz=10.0)
    # Ziegler and Nichols (1942): PI kp = 0.45 Ku, Ti = Pu / 1.2.
    assert zn.gains.kp == pytest.approx(0.45 * ku, rel=1e-12)
    assert zn.gains.ki_per_s == pytest.approx(0.45 * ku / (pu / 1.2), rel=1e-12)
    assert not zn.ok and zn.report is None and [f.code for f in zn.findings] == ["not_verified"]
    robust = design.design_ultimate_loop(ku, pu, rate_hz=10.0, method="robust", ms_max=1.4)
    # The loop at the ultimate frequency, L = -(kp / Ku)(1 - j / (omega_u Ti)), lies on |1 + L| = 1 / Ms.
    wu = 2.0 * math.pi / pu
    ti = robust.gains.kp / robust.gains.ki_per_s
    loop = -(robust.gains.kp / ku) * (1.0 - 1j / (wu * ti))
    assert abs(1.0 + loop) == pytest.approx(1.0 / 1.4, rel=1e-9)
    assert ti == pytest.approx(pu / 1.2, rel=1e-12)
    with pytest.raises(ModelError) as info:
        design.design_ultimate_loop(ku, pu, rate_hz=10.0, method="robust", pid=True)
    assert info.value.key == "pid"
    with pytest.raises(ModelError) as info:
        design.design_ultimate_loop(ku, pu, rate_hz=10.0, method="simc")
    assert info.value.key == "method"


def test_ultimate_loop_with_the_static_gain_verifies_on_an_fopdt_with_that_ultimate_point():
    d = design.design_ultimate_loop(-2.5, 7.0, rate_hz=10.0, method="zn-cycle", static_gain=-1.0)
    assert d.kind == "ultimate" and d.report is not None and d.plant is not None
    ku, pu = tuning.ultimate_point(d.plant, None)  # the continuous FOPDT's own phase crossing
    assert ku == pytest.approx(-2.5, rel=1e-6) and pu == pytest.approx(7.0, rel=1e-6)
    assert np.isfinite(d.report.margins.ms)
