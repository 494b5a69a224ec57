"""Every command's --json uses only registered field names, and docs/json-fields.md is current."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import pytest

from compensator import __version__
from compensator.vocabulary import SCHEMA_VERSION, unregistered_names

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tools"))
import update_json_docs  # noqa: E402

sys.path.pop(0)


@pytest.fixture(scope="module")
def runs(tmp_path_factory, demo_run):
    # The demo's document is the suite's one demo run (--out and the print step change no name); the other
    # commands run here.
    import json

    demo = next(inv for inv in update_json_docs.INVOCATIONS if inv.command == "demo")
    others = tuple(inv for inv in update_json_docs.INVOCATIONS if inv is not demo)
    shared = update_json_docs.Run(invocation=demo, argv=("demo", "--json"), status=demo_run.result.status,
                                  document=json.loads(demo_run.result.stdout), stderr=demo_run.result.stderr)
    return [shared, *update_json_docs.collect(tmp_path_factory.mktemp("json"), others)]


def _json_commands(parser: argparse.ArgumentParser, prefix: str = "") -> set[str]:
    """Every (sub)command of ``parser`` that takes --json, as 'calibrate iv'."""
    found = set()
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for name, sub in action.choices.items():
                found |= _json_commands(sub, f"{prefix} {name}".strip())
        elif "--json" in action.option_strings:
            found.add(prefix)
    return found


def test_every_command_with_json_is_run():
    from compensator.cli import build_parser

    assert _json_commands(build_parser()) == {inv.command for inv in update_json_docs.INVOCATIONS}


def test_every_command_prints_a_versioned_document_of_registered_names(runs):
    bad = {}
    for run in runs:
        assert run.status == run.invocation.status, (run.argv, run.stderr)
        assert isinstance(run.document, dict), (run.argv, run.stderr)
        assert run.document["schema_version"] == SCHEMA_VERSION
        assert run.document["compensator_version"] == __version__
        unknown = unregistered_names(run.document)
        if unknown:
            bad[" ".join(run.argv[:3])] = unknown
    assert not bad, f"JSON names not in compensator/vocabulary.py: {bad}"


def test_documents_hold_no_float_noise_and_no_negative_zero(runs):
    def numbers(value):
        if isinstance(value, dict):
            for v in value.values():
                yield from numbers(v)
        elif isinstance(value, list):
            for v in value:
                yield from numbers(v)
        elif isinstance(value, float):
            yield value

    values = [v for run in runs for v in numbers(run.document)]
    assert len(values) > 500
    assert all(len(repr(abs(v)).split("e")[0].replace(".", "").strip("0")) <= 12 for v in values)
    assert not any(v == 0 and str(v).startswith("-") for v in values)


def test_the_same_quantity_has_the_same_name(runs):
    # The names the vocabulary replaced must not come back.
    retired = {"ki", "kd", "pde", "crosstalk", "dark_rate_khz", "uniform_bytes", "optimised_bytes"}
    for run in runs:
        from compensator.vocabulary import field_names

        assert not retired & {n for n, _ in field_names(run.document)}, run.argv


def test_documented_fields_are_current(runs):
    expected = update_json_docs.render(runs)
    assert update_json_docs.DOC.read_text() == expected, "run python tools/update_json_docs.py"


def test_model_json_uses_fractions_not_percent(runs):
    # The model's PDE and crosstalk come out as fractions (0..1) under *_fraction names.
    model = next(r for r in runs if r.invocation.command == "model" and "--overvoltage-v" in r.argv)
    point = model.document["points"][0]
    assert 0 < point["pde_fraction"] < 1 and 0 < point["crosstalk_fraction"] < 1
    assert point["overvoltage_v"] == pytest.approx(5.0)
