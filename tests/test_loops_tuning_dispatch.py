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
    with pytest.raises(ModelError, match="disagree in the sign"):
        tuning.tune(plants.fopdt_plant(1.0, 10.0, 1.0), "robust", T, also_plants=[plants.fopdt_plant(-1.0, 10.0, 1.0)])


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
