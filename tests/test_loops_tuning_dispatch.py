"""The dispatcher ``tune``: which checks it makes first and what it hands to the robust search."""

from __future__ import annotations

import pytest

from compensator.errors import ModelError
from compensator.loops import plants, tuning

T = 0.1


def test_the_robust_method_checks_its_ms_bound_before_the_sample_time():
    # Two mistakes at once: the robust method names its Ms bound first (the rules have no Ms bound to name).
    plant = plants.fopdt_plant(1.0, 1.0, 0.1)
    with pytest.raises(ModelError) as info:
        tuning.tune(plant, "robust", 0.0, ms_max=1.0)
    assert (info.value.key, info.value.reason[:13]) == ("ms_max", "must exceed 1")
    with pytest.raises(ModelError) as info:
        tuning.tune(plant, "simc", 0.0, ms_max=1.0)
    assert (info.value.key, info.value.reason) == ("", "the sample time must be positive")


def test_tune_hands_the_other_plants_to_the_robust_search():
    # A plant of the other sign among ``also_plants`` is refused by the search before any computation.
    with pytest.raises(ModelError) as info:
        tuning.tune(plants.fopdt_plant(1.0, 10.0, 1.0), "robust", T, also_plants=[plants.fopdt_plant(-1.0, 10.0, 1.0)])
    assert info.value.reason == "the plants disagree in the sign of their gain: no single controller suits them all"


def test_the_ultimate_cycle_rule_keeps_the_model_it_was_given():
    model = plants.FopdtModel(2.0, 30.0, 5.0)
    res = tuning.tune(plants.model_plant(model), "zn-cycle", T, model=model)
    assert res.model == model and res.ultimate_gain > 0


def test_only_the_simc_pid_fits_a_second_order_model():
    # SIMC PID needs tau2 (Skogestad 2003); every other rule, and the SIMC PI, works on the fitted FOPDT.
    from compensator.loops.identify import approximate_plant

    plant = plants.sopdt_plant(2.0, 30.0, 4.0, 5.0)
    fopdt = approximate_plant(plant, "fopdt")
    assert isinstance(fopdt, plants.FopdtModel)
    assert tuning.tune(plant, "simc", T).model == fopdt
    assert tuning.tune(plant, "amigo", T, pid=True).model == fopdt


# Each rule's formula by hand on the model with the sampling delay added: theta = 5 + 1.5 x 0.1 = 5.15 s.
L_EFF = 5.15
_A = 2.0 * L_EFF / 30.0  # Ziegler and Nichols' a = K theta / tau
_KC_SIMC_PID = 30.0 / (2.0 * 2.0 * L_EFF)  # tau_c = theta
_KC_IMC_PID = (60.0 + L_EFF) / (2.0 * (8.0 + L_EFF))  # lambda = 4 s


@pytest.mark.parametrize("method, model, options, expected", [
    # Skogestad, J. Process Control 13, 291, 2003: Kc = tau / (K (tau_c + theta)), Ti = min(tau, 4 (tau_c + theta)).
    ("simc", plants.FopdtModel(2.0, 30.0, 5.0), {"tau_c_s": 3.0},
     (30.0 / (2.0 * 8.15), 30.0 / (2.0 * 8.15) / 30.0, 0.0)),
    # The SIMC PID (tau_c = theta, Td = tau2 = 4 s) converted from series to parallel form.
    ("simc", plants.SopdtModel(2.0, 30.0, 4.0, 5.0), {"pid": True},
     (_KC_SIMC_PID * (1.0 + 4.0 / 30.0), _KC_SIMC_PID / 30.0, _KC_SIMC_PID * 4.0)),
    # Rivera, Morari and Skogestad 1986 (from memory): PID Kc = (2 tau + theta) / (K (2 lambda + theta)),
    # Ti = tau + theta / 2, Td = tau theta / (2 tau + theta).
    ("imc", plants.FopdtModel(2.0, 30.0, 5.0), {"pid": True, "tau_c_s": 4.0},
     (_KC_IMC_PID, _KC_IMC_PID / (30.0 + L_EFF / 2.0), _KC_IMC_PID * 30.0 * L_EFF / (60.0 + L_EFF))),
    # Ziegler and Nichols, Trans. ASME 64, 759, 1942: PI 0.9 / a, Ti = 3 theta; PID 1.2 / a, Ti = 2 theta, Td = theta / 2.
    ("zn", plants.FopdtModel(2.0, 30.0, 5.0), {}, (0.9 / _A, 0.9 / _A / (3.0 * L_EFF), 0.0)),
    ("zn", plants.FopdtModel(2.0, 30.0, 5.0), {"pid": True},
     (1.2 / _A, 1.2 / _A / (2.0 * L_EFF), 1.2 / _A * L_EFF / 2.0)),
])
def test_tune_hands_the_rule_its_options(method, model, options, expected):
    res = tuning.tune(plants.model_plant(model), method, T, model=model, **options)
    g = res.gains
    assert (g.kp, g.ki_per_s, g.kd_s) == pytest.approx(expected, rel=1e-12)
    assert res.method == method and res.pid is options.get("pid", False) and res.rule_dead_time_s == pytest.approx(L_EFF, rel=1e-12)
