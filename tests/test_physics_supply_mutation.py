"""Bias supply with part errors, its limits and the series-resistor operating point, by hand.

The feedback-injection output is checked against Kirchhoff's current law at the feedback node written out
here, ``(Vout - Vfb)/R1 = Vfb/R2 + (Vfb - Vdac)/R3`` (common practice for adjustable regulators), not against
the module's closed form.
"""

import numpy as np
import pytest

from compensator.errors import ModelError
from compensator.physics.sipm import Breakdown, Sipm, steady_current_a
from compensator.physics.supply import BiasSupply, Dac, network_output_v, sipm_bias_v, solve_operating_point_v


def _kcl_vout(vfb, r1, r2, r3, vdac):
    # Current in R1 (output to node) = current to ground in R2 + current into the DAC through R3.
    return vfb + r1 * (vfb / r2 + (vfb - vdac) / r3)


FEEDBACK = BiasSupply(Dac(12, 2.5), "feedback_injection", feedback_v=1.25, r1_ohm=1e6, r2_ohm=50e3, r3_ohm=200e3,
                      min_output_v=21.0, max_output_v=30.0)


def test_feedback_injection_with_every_part_error_by_kcl():
    # Code 1000 with a 2-code DAC offset, +1 % DAC scale, R1 +1 %, R2 -2 %, R3 +3 %, feedback +0.5 %.
    vdac = 1002 * 2.5 / 4096 * 1.01
    expected = _kcl_vout(1.25 * 1.005, 1.01e6, 49e3, 206e3, vdac)
    out = network_output_v(FEEDBACK, 1000, dac_error=0.01, dac_offset_lsb=2.0, resistor_errors=(0.01, -0.02, 0.03),
                           feedback_error=0.005, clip=False)
    assert float(out) == pytest.approx(expected, rel=1e-13, abs=0)
    assert float(out) == pytest.approx(30.2812, abs=1e-4)  # the same, worked through once by hand
    # Each error alone moves the output in its own direction (one at a time, the others zero).
    base = _kcl_vout(1.25, 1e6, 50e3, 200e3, 1000 * 2.5 / 4096)
    for kw, vdac, vfb, r in ((dict(dac_error=0.01), 1000 * 2.5 / 4096 * 1.01, 1.25, (1e6, 50e3, 200e3)),
                             (dict(dac_offset_lsb=-3.0), 997 * 2.5 / 4096, 1.25, (1e6, 50e3, 200e3)),
                             (dict(resistor_errors=(0.01, 0.0, 0.0)), 1000 * 2.5 / 4096, 1.25, (1.01e6, 50e3, 200e3)),
                             (dict(resistor_errors=(0.0, 0.02, 0.0)), 1000 * 2.5 / 4096, 1.25, (1e6, 51e3, 200e3)),
                             (dict(resistor_errors=(0.0, 0.0, -0.02)), 1000 * 2.5 / 4096, 1.25, (1e6, 50e3, 196e3)),
                             (dict(feedback_error=-0.01), 1000 * 2.5 / 4096, 1.2375, (1e6, 50e3, 200e3))):
        got = float(network_output_v(FEEDBACK, 1000, clip=False, **kw))
        assert got == pytest.approx(_kcl_vout(vfb, *r, vdac), rel=1e-13, abs=0), kw
        assert got != pytest.approx(base, rel=1e-6, abs=0), kw


def test_network_output_defaults_and_limits():
    # Without errors it is the nominal output: code 0 asks for 32.5 V (clipped to 30 V), code 4095 for
    # 32.5 - 4095 x 2.5/4096 x 5 = 20.0031 V (clipped to 21 V); code 2048 gives 26.25 V inside the limits.
    codes = np.array([0, 2048, 4095])
    np.testing.assert_allclose(network_output_v(FEEDBACK, codes), [30.0, 26.25, 21.0], rtol=1e-14)
    np.testing.assert_allclose(network_output_v(FEEDBACK, codes), FEEDBACK.output_v(codes), rtol=1e-14)
    unclipped = [32.5, 26.25, 32.5 - 4095 * 2.5 / 4096 * 5]
    np.testing.assert_allclose(network_output_v(FEEDBACK, codes, clip=False), unclipped, rtol=1e-14)


def test_direct_network_with_gain_error_by_hand():
    # Vout = offset + gain (1 + e) Vdac: 5 V + 10 x 1.02 x (1000 + 1) x 4.096/4096 V = 15.2102 V.
    s = BiasSupply(Dac(12, 4.096), "direct", gain_v_per_v=10.0, offset_v=5.0, min_output_v=0.0, max_output_v=60.0)
    out = network_output_v(s, 1000, dac_offset_lsb=1.0, resistor_errors=(0.02, 0.5, 0.5))  # R2, R3 unused
    assert float(out) == pytest.approx(5.0 + 10.0 * 1.02 * 1001 * 0.001, rel=1e-14, abs=0)
    assert float(network_output_v(s, 1000)) == pytest.approx(15.0, rel=1e-14, abs=0)


DARKLESS = Sipm(Breakdown(25.0), 100e-15, 10_000, dark_rate_hz=0.0, pde_max_fraction=0.4,
                pde_saturation_overvoltage_v=2.0)


def test_operating_point_defaults_dark_and_converged():
    # A SiPM without dark counts draws no current in the dark, so the bias is the supply output exactly;
    # even one photon per second through 1 Gohm would lower it by R q G PDE = 1e9 x 1.6e-19 x 1.87e6 x 0.31 = 9e-5 V.
    assert float(solve_operating_point_v(lambda i: 28.0, 28.0, 1e9, DARKLESS, 25.0)) == 28.0
    lit = float(solve_operating_point_v(lambda i: 28.0, 28.0, 1e9, DARKLESS, 25.0, photon_rate_hz=1.0))
    assert 5e-5 < 28.0 - lit < 2e-4
    # The default tolerance (1e-9 V) reaches the fixed point V = Vs - R I(V), checked with the current model.
    dev = Sipm(Breakdown(24.5, 25.0, 21.5), 160e-15, 14_400, dark_rate_hz=2e6, dark_overvoltage_exponent=2.0,
               crosstalk_probability=0.08)
    v = float(solve_operating_point_v(lambda i: 27.5, 27.5, 1e4, dev, 45.0))
    assert abs(v - (27.5 - 1e4 * float(steady_current_a(dev, v, 45.0)))) < 1e-9
    first_step = 27.5 - 1e4 * float(steady_current_a(dev, 27.5, 45.0))
    assert abs(first_step - v) > 1e-4  # so a loose tolerance would be caught


def test_operating_point_with_a_current_dependent_output():
    # A firmware that adds back exactly the drop it measures, Vout(I) = Vs + R I, holds the SiPM at Vs.
    dev = Sipm(Breakdown(24.5, 25.0, 21.5), 160e-15, 14_400, dark_rate_hz=2e6, dark_overvoltage_exponent=2.0)
    v = float(solve_operating_point_v(lambda i: 27.5 + 1e4 * i, 27.5, 1e4, dev, 45.0))
    assert v == pytest.approx(27.5, abs=1e-12)
    # A current-scale factor of 2 doubles the drop at the fixed point: V = Vs - R 2 I(V).
    v2 = float(solve_operating_point_v(lambda i: 27.5, 27.5, 1e4, dev, 45.0, current_scale=2.0))
    assert abs(v2 - (27.5 - 2e4 * float(steady_current_a(dev, v2, 45.0)))) < 1e-9
    with pytest.raises(ModelError) as info:
        solve_operating_point_v(lambda i: 27.5, 27.5, 1e4, dev, 45.0, max_iter=1)
    assert info.value.key == "series_resistor_ohm"
    assert info.value.reason == "series-resistor operating point did not converge (R dI/dV >= 1?)"
    supply = BiasSupply(Dac(16, 2.5), series_resistor_ohm=1e4, r1_ohm=1e6, r2_ohm=43.2e3, r3_ohm=250e3)
    assert float(sipm_bias_v(supply, dev, 27.5, 45.0)) == pytest.approx(
        float(solve_operating_point_v(lambda i: 27.5, 27.5, 1e4, dev, 45.0)), abs=1e-12)


def test_output_range_spans_both_end_codes():
    # Unclipped, the feedback network's outputs run from code 4095 (32.5 - 4095 x 2.5/4096 x 5 = 20.0031 V)
    # to code 0 (32.5 V), the highest: a higher code lowers the output.
    wide = BiasSupply(Dac(12, 2.5), "feedback_injection", feedback_v=1.25, r1_ohm=1e6, r2_ohm=50e3, r3_ohm=200e3)
    assert wide.output_range_v() == pytest.approx((32.5 - 4095 * 2.5 / 4096 * 5, 32.5), rel=1e-14, abs=0)
