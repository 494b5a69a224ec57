"""calibration.iv: checks added for mutation testing (each against a hand calculation or the exact refusal)."""

import numpy as np
import pytest

from compensator.calibration import iv


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
