"""Profile loading and validation: every problem names file, line, key path and reason."""

from pathlib import Path

import pytest

from compensator.errors import ProfileError
from compensator.profiles import load_board, load_profile, load_sipm, render_profile
from compensator.profiles.schema import KINDS

GOOD_SIPM = (Path(__file__).parent.parent / "hardware_profiles" / "hut-sipm-a.yaml").read_text()


def write(tmp_path, text, name="p.yaml"):
    path = tmp_path / name
    path.write_text(text)
    return path


def problems(path, **kw):
    with pytest.raises(ProfileError) as info:
        load_profile(path, **kw)
    return info.value.problems


def test_bundled_profiles_load(profiles_dir):
    kinds = {}
    for path in sorted(profiles_dir.glob("*.yaml")):
        profile = load_profile(path)
        kinds.setdefault(type(profile).__name__, []).append(profile)
        assert profile.sha256 and profile.name
    assert len(kinds["SipmProfile"]) >= 3 and len(kinds["BoardProfile"]) >= 2 and kinds["ThermalProfile"]
    tempcos = sorted(p.device.breakdown.tempco_mv_per_k for p in kinds["SipmProfile"])
    breakdowns = sorted(p.device.breakdown.breakdown_v_at_ref for p in kinds["SipmProfile"])
    assert tempcos[0] <= 25 and tempcos[-1] >= 50  # spans about 20 to 60 mV/K
    assert breakdowns[0] <= 26 and breakdowns[-1] >= 50  # spans about 24 to 55 V
    sensors = {type(p.temperature.sensor).__name__ for p in kinds["BoardProfile"]}
    assert sensors == {"NtcSensor", "RtdSensor"}


def test_values_reach_the_model(sipm_a, board_ntc):
    assert sipm_a.device.cell_capacitance_f == pytest.approx(160e-15)  # written as 160e-15 (a YAML 1.1 string)
    assert sipm_a.device.breakdown.tempco_mv_per_k == 21.5
    assert board_ntc.supply.series_resistor_ohm == 10_000.0
    assert board_ntc.safe_dac_code == 65535  # feedback injection: the highest code gives the lowest output


def test_empty_file(tmp_path):
    (p,) = problems(write(tmp_path, ""))
    assert p.line == 1 and "empty" in p.reason


def test_yaml_syntax_error_has_line(tmp_path):
    (p,) = problems(write(tmp_path, "kind: sipm\nname: x\nbreakdown: [1, 2\ncell: {}\n"))
    assert p.line >= 3 and "YAML syntax error" in p.reason
    assert str(p).startswith(f"{tmp_path / 'p.yaml'}:{p.line}: ")


def test_missing_unknown_wrong_type_and_non_physical(tmp_path):
    text = GOOD_SIPM.replace("  capacitance_f: 160e-15", "  capacitance_f: -160e-15")
    text = text.replace("  count: 18980", "  count: many")
    text = text.replace("  doubling_temp_k: 9.0\n", "")
    text = text.replace("  max_fraction: 0.50", "  max_fraction: 0.50\n  colour: blue")
    found = {p.key: p for p in problems(write(tmp_path, text))}
    assert "greater than 0" in found["cell.capacitance_f"].reason
    assert "whole number" in found["cell.count"].reason
    assert "missing" in found["dark.doubling_temp_k"].reason
    assert "unknown key" in found["pde.colour"].reason
    lines = text.splitlines()
    assert lines[found["cell.capacitance_f"].line - 1].strip().startswith("capacitance_f")
    assert lines[found["pde.colour"].line - 1].strip().startswith("colour")


def test_duplicate_key(tmp_path):
    text = GOOD_SIPM.replace("  count: 18980", "  count: 18980\n  count: 100")
    (p,) = problems(write(tmp_path, text))
    assert p.key == "cell.count" and "duplicate" in p.reason


def test_missing_section_and_kind(tmp_path):
    text = GOOD_SIPM.split("limits:")[0]
    (p,) = problems(write(tmp_path, text))
    assert p.key == "limits" and "missing" in p.reason
    (p,) = problems(write(tmp_path, "name: x\n", "nokind.yaml"))
    assert p.key == "kind"
    (p,) = problems(write(tmp_path, "kind: laser\nname: x\n", "badkind.yaml"))
    assert p.key == "kind" and "one of" in p.reason


def test_not_a_mapping(tmp_path):
    (p,) = problems(write(tmp_path, "- 1\n- 2\n"))
    assert "mapping" in p.reason
    found = problems(write(tmp_path, GOOD_SIPM.replace("  count: 18980", "  count: [1, 2]"), "list.yaml"))
    assert found[0].key == "cell.count"


def test_wrong_kind_requested(tmp_path, profiles_dir):
    with pytest.raises(ProfileError) as info:
        load_board(profiles_dir / "hut-sipm-a.yaml")
    assert "expected a 'board' profile" in str(info.value)


def test_variant_keys(tmp_path, profiles_dir):
    text = (profiles_dir / "hut-board-ntc.yaml").read_text()
    wrong = text.replace("  beta_k: 3435.0", "  beta_k: 3435.0\n  r0_ohm: 1000.0")
    (p,) = problems(write(tmp_path, wrong))
    assert p.key == "temperature_sensor.r0_ohm" and "does not apply" in p.reason
    missing = text.replace("  beta_k: 3435.0\n", "")
    (p,) = problems(write(tmp_path, missing, "m.yaml"))
    assert p.key == "temperature_sensor.beta_k" and "missing" in p.reason


def test_cross_key_checks(tmp_path, profiles_dir):
    text = (profiles_dir / "hut-board-ntc.yaml").read_text()
    (p,) = problems(write(tmp_path, text.replace("  min_temp_c: -25.0", "  min_temp_c: 50.0")))
    assert p.key == "limits.min_temp_c" and "below" in p.reason
    found = problems(write(tmp_path, text.replace("  reference_resistor_ohm: 10000.0", "  reference_resistor_ohm: 1.0"),
                           "rail.yaml"))
    assert any("rail" in p.reason and p.key == "front_end.reference_resistor_ohm" for p in found)
    (p,) = problems(write(tmp_path, text.replace("  max_temp_c: 45.0", "  max_temp_c: 45.0\n  safe_dac_code: 70000"),
                          "safe.yaml"))
    assert p.key == "limits.safe_dac_code"


def test_unreadable_and_binary_files(tmp_path):
    (p,) = problems(tmp_path / "absent.yaml")
    assert "cannot read" in p.reason
    path = tmp_path / "bin.yaml"
    path.write_bytes(b"\xff\xfe\x00kind")
    (p,) = problems(path)
    assert "UTF-8" in p.reason


def test_non_finite_values_rejected(tmp_path):
    (p,) = problems(write(tmp_path, GOOD_SIPM.replace("  rate_hz: 1.4e6", "  rate_hz: .nan")))
    assert p.key == "dark.rate_hz"


def test_render_round_trip(tmp_path, profiles_dir):
    for name in ("hut-sipm-b.yaml", "hut-board-pt1000.yaml", "hut-cooler.yaml"):
        original = load_profile(profiles_dir / name)
        kind = next(k for k in KINDS if type(original).__name__.lower().startswith(k))
        text = render_profile(kind, original.values, header="round trip")
        again = load_profile(write(tmp_path, text, name))
        assert again.values == original.values
    sipm = load_sipm(write(tmp_path, render_profile("sipm", load_sipm(profiles_dir / "hut-sipm-a.yaml").values), "a.yaml"))
    assert sipm.device == load_sipm(profiles_dir / "hut-sipm-a.yaml").device


from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(cut=st.integers(min_value=0, max_value=len(GOOD_SIPM)), junk=st.text(max_size=12))
def test_mangled_profiles_fail_only_with_profile_errors(tmp_path, cut, junk):
    # Whatever the damage, loading either succeeds or raises ProfileError: never another exception.
    path = tmp_path / "mangled.yaml"
    path.write_text(GOOD_SIPM[:cut] + junk + GOOD_SIPM[cut + len(junk):], encoding="utf-8")
    try:
        load_profile(path)
    except ProfileError as exc:
        assert exc.problems and all(p.file == str(path) for p in exc.problems)


@settings(max_examples=100, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(value=st.one_of(st.text(max_size=8), st.integers(), st.floats(), st.booleans(), st.none()),
       key=st.sampled_from(["breakdown_v_at_ref", "capacitance_f", "count", "probability", "max_current_a",
                            "doubling_temp_k", "ref_temp_c"]))
def test_any_value_in_any_key_fails_cleanly(tmp_path, value, key):
    import json
    lines = [f"  {key}: {json.dumps(value)}" if line.strip().startswith(f"{key}:") else line
             for line in GOOD_SIPM.splitlines()]
    path = tmp_path / "value.yaml"
    path.write_text("\n".join(lines) + "\n")
    try:
        load_profile(path)
    except ProfileError as exc:
        assert all(p.line > 0 for p in exc.problems)
