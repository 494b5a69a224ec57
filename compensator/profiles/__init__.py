"""Hardware profiles: YAML files in ``hardware_profiles/`` -> validated frozen objects."""

from compensator.profiles.loader import RawProfile, read_raw_profile
from compensator.profiles.models import (
    BoardProfile,
    SipmProfile,
    ThermalProfile,
    load_board,
    load_profile,
    load_sipm,
    load_thermal,
)
from compensator.profiles.scenario import ScenarioProfile, load_scenario
from compensator.profiles.writer import render_profile

__all__ = [
    "BoardProfile", "RawProfile", "SipmProfile", "ThermalProfile", "load_board", "load_profile",
    "load_sipm", "load_thermal", "read_raw_profile", "render_profile", "ScenarioProfile", "load_scenario",
]
