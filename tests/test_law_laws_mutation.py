"""Building a law: the breakdown definition it shifts to, the records it keeps, the refusals in full.

Pinned where mutation testing (tools/mutation.md) found these facts unchecked: every figure below is
worked by hand from the profile's own numbers, every refusal names its file, key and reason.
"""

from dataclasses import replace

import numpy as np
import pytest

from compensator.errors import ModelError, Problem, ProfileError
from compensator.law import build_law, check_law_in_range

IV = "iv_inverse_log_derivative"


def _iv_profile(sipm, offset_v=None, err_v=0.0):
    bd = replace(sipm.device.breakdown, definition=IV, definition_offset_v=offset_v, definition_offset_err_v=err_v)
    return replace(sipm, device=replace(sipm.device, breakdown=bd))


def test_iv_breakdown_from_the_profile_is_moved_to_the_gain_intercept(sipm_a, board_ntc):
    # hut-sipm-a: 24.5 V at 25 C; an I-V breakdown 120 mV above the gain intercept (offset -0.12 V, 150 mV 1 sigma).
    law = build_law(_iv_profile(sipm_a, -0.12, 0.15), board_ntc, 3.0)
    bd = law.sipm.breakdown
    assert bd.breakdown_v_at_ref == pytest.approx(24.5 - 0.12, abs=1e-12)
    # The law's device is on the gain intercept now, with no offset left to apply twice.
    assert bd.definition == "gain_intercept" and bd.definition_offset_v is None and bd.definition_offset_err_v == 0.0
    assert law.breakdown_offset_v == -0.12 and law.breakdown_offset_err_v == 0.15
    (finding,) = law.findings
    assert finding.code == "breakdown_definitions_mixed"
    assert finding.message == (f"hut-sipm-a holds the {IV} breakdown; the law adds -120.0 mV (+-150.0 mV, from the "
                               "profile) to reach the gain-intercept breakdown")


def test_given_offset_on_an_iv_breakdown(sipm_a, board_ntc):
    # A given offset wins over the profile's and carries no uncertainty of its own: +50 mV, +-0.0 mV.
    law = build_law(_iv_profile(sipm_a, -0.12, 0.02), board_ntc, 3.0, breakdown_offset_v=0.05)
    assert law.sipm.breakdown.breakdown_v_at_ref == pytest.approx(24.55, abs=1e-12)
    assert law.breakdown_offset_err_v == 0.0
    (finding,) = law.findings
    assert finding.message == (f"hut-sipm-a holds the {IV} breakdown; the law adds +50.0 mV (+-0.0 mV, given) "
                               "to reach the gain-intercept breakdown")


def test_iv_breakdown_without_an_offset_is_refused_in_full(sipm_a, board_ntc):
    with pytest.raises(ModelError) as info:
        build_law(_iv_profile(sipm_a), board_ntc, 3.0)
    assert info.value.key == "breakdown.definition"
    assert info.value.reason == (
        f"hut-sipm-a holds the {IV} breakdown, but a gain law needs the gain-intercept breakdown (they differ by "
        "tens to hundreds of millivolts); give breakdown.definition_offset_v in the profile (or the law's "
        "breakdown_offset_v), or recalibrate from gain scans")


def test_law_records_what_it_was_built_from(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0, kind="constant_gain")
    assert law.photon_rate_hz == 0.0  # dark by default
    assert law.sipm_name == "hut-sipm-a" and law.board_name == "hut-board-ntc"
    # hut-sipm-a reads a crystal, but only the response law keeps it.
    assert sipm_a.scintillator is not None and law.scintillator is None
    assert build_law(sipm_a, board_ntc, 3.0, kind="constant_response").scintillator == sipm_a.scintillator


def test_missing_sections_are_refused_with_file_key_and_reason(sipm_a, sipm_b, board_pt1000, board_ntc):
    with pytest.raises(ProfileError) as info:
        build_law(sipm_b, board_pt1000, 4.0, drop_correction="measured")
    assert info.value.problems == [Problem(str(board_pt1000.source), 0, "current_sense",
                                           "missing section: the measured drop correction needs the board's SiPM "
                                           "current channel (or use the modelled correction)")]
    with pytest.raises(ProfileError) as info:
        build_law(sipm_b, board_ntc, 4.0, kind="constant_response")
    assert info.value.problems == [Problem(str(sipm_b.source), 0, "scintillator",
                                           "missing section: the constant_response law needs the crystal's "
                                           "light-yield coefficient")]


def test_slope_against_richardson_extrapolation(sipm_a, board_ntc):
    # The modelled drop bends the output (the dark current doubles every few kelvin), so the slope is not
    # constant. Reference: Richardson extrapolation of two central differences (steps 0.1 and 0.05 K), whose
    # error is O(h^4) (common practice); the slope's own 0.01 K central difference is within 1.1e-8 of it
    # (h^2 f''' / 6 at 45 C), a 1 K step would be 1e-4 off.
    law = build_law(sipm_a, board_ntc, 3.0, drop_correction="modelled")
    temps_c = np.array([-25.0, 25.0, 45.0])
    f = law.unclamped_output_v

    def central(h):
        return (f(temps_c + h) - f(temps_c - h)) / (2.0 * h)

    reference = (4.0 * central(0.05) - central(0.1)) / 3.0
    assert law.slope_v_per_k(temps_c) == pytest.approx(reference, rel=3e-8)
    assert 0.0215 < reference[0] < reference[1] < reference[2]  # above the 21.5 mV/K tempco, rising with the drop


def test_a_limit_reached_exactly_does_not_clamp(sipm_a, board_ntc):
    # hut-sipm-a: Vbd = 24.5 V + 21.5 mV/K (T - 25 C), no curvature. At the device's 7 V maximum the law asks
    # for exactly Vbd + 7 V: reached, not exceeded, so nothing is named and the law is in range.
    at_max = build_law(sipm_a, board_ntc, 7.0, drop_correction="none")
    temps_c = np.linspace(-25.0, 45.0, 8)
    assert list(at_max.limiting(temps_c)) == [""] * 8
    check_law_in_range(at_max)
    # A board limit equal to what the 3 V law needs at 45 C (24.5 + 0.43 + 3 = 27.93 V, by hand).
    want_45 = float(build_law(sipm_a, board_ntc, 3.0, drop_correction="none").unclamped_output_v(45.0))
    assert want_45 == pytest.approx(27.93, abs=1e-12)
    equal = build_law(sipm_a, replace(board_ntc, max_bias_v=want_45), 3.0, drop_correction="none")
    assert list(equal.limiting([25.0, 45.0])) == ["", ""]
    check_law_in_range(equal)


def test_a_law_clamped_at_one_point_of_the_scan(sipm_a, board_ntc):
    # A limit between what the law needs at 44.9 C (27.92785 V) and at 45 C (27.93 V): only the last point
    # of the 0.1 K scan is clamped, and the refusal names it.
    board = replace(board_ntc, max_bias_v=27.929)
    law = build_law(sipm_a, board, 3.0, drop_correction="none")
    assert list(law.limiting([44.9, 45.0])) == ["", "board max_bias_v"]
    with pytest.raises(ModelError) as info:
        check_law_in_range(law)
    assert info.value.key == "overvoltage_v"
    assert info.value.reason == ("the law needs 27.930 to 27.930 V from 45 to 45 C, beyond the board max_bias_v; "
                                 "lower --overvoltage-v or use another board")
