"""The vocabulary of output names and the one JSON serialiser."""

from __future__ import annotations

import enum
import io
import json
from dataclasses import dataclass
from pathlib import Path
from typing import NamedTuple

import numpy as np
import pytest

from compensator.cli._common import format_number, format_table, print_json
from compensator.findings import Finding, Severity
from compensator.vocabulary import (
    FIELDS,
    SECTIONS,
    SIGNIFICANT_DIGITS,
    dumps_json,
    fields_markdown,
    round_significant,
    suffix_unit,
    to_json_value,
    unregistered_names,
)


def test_every_name_is_snake_case_and_each_section_sorted():
    for title, section in SECTIONS:
        names = [f.name for f in section]
        assert names == sorted(names), title
        for f in section:
            assert f.name == f.name.lower() and " " not in f.name and f.unit and f.description, f


def test_the_unit_of_a_name_matches_its_suffix():
    # A name ending in _v is in volt, _pct in percent, _c in degree Celsius, ...: the suffix is a promise.
    wrong = {f.name: f.unit for f in FIELDS.values()
             if suffix_unit(f.name) is not None
             and not (f.unit == suffix_unit(f.name) or f.unit.startswith(suffix_unit(f.name) + " "))}
    assert not wrong
    assert suffix_unit("tempco_mv_per_k") == "mV/K" and suffix_unit("dark_rate_hz") == "Hz"
    assert suffix_unit("k_per_code") is None and suffix_unit("gain") is None
    assert suffix_unit("breakdown_err_v") == "V" and suffix_unit("fixed_bias_gain_change_pct_per_k") == "%/K"


def test_percent_only_under_pct_names_and_fractions_under_fraction_names():
    assert all(f.name.endswith(("_pct", "_pct_per_k")) for f in FIELDS.values() if f.unit.startswith("%"))
    for bare in ("ki", "kd", "pde", "crosstalk", "dark_rate_khz"):
        assert bare not in FIELDS


def test_round_significant():
    assert round_significant(-1.1400000000000001) == -1.14
    assert repr(round_significant(0.1 + 0.2)) == "0.3"
    assert round_significant(123456789.123456789) == 123456789.123
    assert round_significant(1.234567890123456e-20) == 1.23456789012e-20
    assert repr(round_significant(-0.0)) == "0.0"
    assert round_significant(float("nan")) is None and round_significant(float("-inf")) is None
    assert SIGNIFICANT_DIGITS == 12


class _Colour(enum.IntEnum):
    DARK_RED = 3


class _Bits(enum.IntFlag):
    OPEN = 1
    SHORT = 2
    HOT = 4


class _Pair(NamedTuple):
    low_v: float
    high_v: float


@dataclass(frozen=True, kw_only=True)
class _Record:
    temp_c: np.ndarray
    count: np.int64
    flag: np.bool_
    pair: _Pair
    finding: Finding
    path: Path


def test_one_serialiser_for_records_tuples_enums_findings_and_numpy():
    record = _Record(temp_c=np.array([-0.0, 1 / 3, np.nan]), count=np.int64(7), flag=np.bool_(True),
                     pair=_Pair(0.1 + 0.2, -2.0), path=Path("a/b.csv"),
                     finding=Finding(code="ms_high", severity=Severity.WARNING, message="Ms 1.9"))
    out = to_json_value(record)
    assert out == {"temp_c": [0.0, 0.333333333333, None], "count": 7, "flag": True,
                   "pair": {"low_v": 0.3, "high_v": -2.0}, "path": "a/b.csv",
                   "finding": {"code": "ms_high", "severity": "warning", "message": "Ms 1.9"}}
    assert type(out["count"]) is int and type(out["flag"]) is bool
    assert to_json_value(_Colour.DARK_RED) == "dark_red"
    assert to_json_value(_Bits.OPEN | _Bits.HOT) == ["open", "hot"]
    assert to_json_value({3, 1, 2}) == [1, 2, 3]


def test_data_never_becomes_a_key():
    with pytest.raises(TypeError, match="list of records"):
        to_json_value({25.0: 1.0})
    with pytest.raises(TypeError):
        to_json_value(object())
    with pytest.raises(TypeError):
        to_json_value(1 + 2j)


def test_print_json_heads_the_document_and_is_strict():
    from compensator import __version__

    stream = io.StringIO()
    print_json({"breakdown_v": np.float64(24.500000000000004), "temp_c": float("inf")}, stream)
    text = stream.getvalue()
    assert json.loads(text) == {"schema_version": 1, "compensator_version": __version__, "breakdown_v": 24.5,
                                "temp_c": None}
    assert text.endswith("}\n") and "Infinity" not in text
    with pytest.raises(TypeError):
        dumps_json([1, 2])


def test_unregistered_names_are_located():
    assert unregistered_names({"points": [{"temp_c": 1, "kelvins": 2}], "bogus": {}}) == [".bogus",
                                                                                         ".points[].kelvins"]
    assert unregistered_names({"points": [{"temp_c": 1.0}]}) == []


def test_no_negative_zero_in_text():
    assert format_number(-0.0001, ".3f") == "0.000"
    assert format_number(-0.0004, "+.3f") == "+0.000"
    assert format_number(-4e-9, ".2e") == "-4.00e-09"
    assert format_number(-0.0006, ".3f") == "-0.001"
    assert format_number(-0.0, "") == "0.0"
    assert format_number(np.float64(-1e-7), ".1f") == "0.0"
    assert format_number(-3, "d") == "-3" and format_number(float("nan"), ".2f") == "nan"
    table = format_table([(-0.0001, -1.5)], ["a_v", "b_v"], [".3f", ".1f"])
    assert table.splitlines()[2].split() == ["0.000", "-1.5"]


def test_markdown_lists_every_field_with_its_unit():
    text = fields_markdown({"model": {"temp_c", "gain", "schema_version"}})
    assert "- `compensator model --json`: `gain`, `temp_c`" in text
    assert "| `tempco_mv_per_k` | mV/K |" in text
    assert text.count("\n| `") == len(FIELDS)
