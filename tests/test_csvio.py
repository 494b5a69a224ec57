"""Bench exports as they come: units, separators, decimal commas, units rows, ambiguity refused with a location."""

from __future__ import annotations

import numpy as np
import pytest

from compensator.calibration.measurements import read_breakdown_scan, read_iv
from compensator.csvio import parse_columns_option, read_table
from compensator.errors import InputError


def _write(tmp_path, text, name="iv.csv", encoding="utf-8"):
    path = tmp_path / name
    path.write_bytes(text.encode(encoding))
    return path


@pytest.mark.parametrize("header, scale", [
    ("bias_v,current_a", 1.0),
    ("bias_v,current_ua", 1e-6),
    ("bias_mv,current_na", 1e-9),
    ("Voltage [V],I (A)", 1.0),
    ("V (V),I (uA)", 1e-6),
    ("Bias / V,Current / nA", 1e-9),
    ("voltage (V),current (µA)", 1e-6),
])
def test_units_in_the_header_are_converted(tmp_path, header, scale):
    bias_scale = 1e-3 if "_mv" in header else 1.0
    path = _write(tmp_path, f"{header}\n{24.5 / bias_scale:g},2.5\n{25.0 / bias_scale:g},7.5\n")
    table = read_table(path, ("bias_v", "current_a"))
    assert table.columns["bias_v"] == pytest.approx([24.5, 25.0])
    assert table.columns["current_a"] == pytest.approx([2.5 * scale, 7.5 * scale])
    if header != "bias_v,current_a":
        assert any("current_a from column" in n for n in table.notes)


def test_semicolons_decimal_commas_units_row_comments_and_extra_columns(tmp_path):
    text = ("# exported by a bench meter\n"
            "Index;Voltage;Current;Temperature\n"
            ";(V);(nA);(C)\n"
            "1;24,50;1,25e+00;21,5\n"
            "# a comment between rows\n"
            "2;24,55;2,5;21,5\n")
    table = read_table(_write(tmp_path, text), ("bias_v", "current_a"), ("temp_c",))
    assert table.columns["bias_v"] == pytest.approx([24.50, 24.55])
    assert table.columns["current_a"] == pytest.approx([1.25e-9, 2.5e-9])
    assert table.columns["temp_c"] == pytest.approx([21.5, 21.5])
    assert table.lines.tolist() == [4, 6]
    assert "separator ';'" in table.notes and "decimal commas read as decimal points" in table.notes
    assert any("units row on line 3" in n for n in table.notes)
    assert any("converted from nanoampere to ampere" in n for n in table.notes)


def test_tab_separated_and_kelvin_converted(tmp_path):
    table = read_table(_write(tmp_path, "bias_v\tcurrent_a\ttemp_k\n24.5\t1e-9\t298.15\n24.6\t2e-9\t298.15\n"),
                       ("bias_v", "current_a"), ("temp_c",))
    assert table.columns["temp_c"] == pytest.approx([25.0, 25.0])
    assert "separator tab" in table.notes


def test_user_column_map_with_unit(tmp_path):
    path = _write(tmp_path, "Vsrc,Imeas,T\n24.5,3,20\n24.6,6,20\n")
    cols = parse_columns_option("bias=Vsrc,current=Imeas:ua,temp=T:c")
    table = read_table(path, ("bias_v", "current_a"), ("temp_c",), columns=cols)
    assert table.columns["current_a"] == pytest.approx([3e-6, 6e-6])
    assert table.columns["bias_v"] == pytest.approx([24.5, 24.6])
    with pytest.raises(InputError, match="--columns"):
        parse_columns_option("bias")
    with pytest.raises(InputError, match="unknown name"):
        parse_columns_option("power=P")


@pytest.mark.parametrize("text, line, fragment", [
    ("bias_v,current_a,current_a\n1,2,3\n", 1, "same name"),
    ("bias_v,I (A),Current [uA]\n1,2,3\n", 1, "both look like current"),
    ("bias_v,current\n1,2\n", 1, "no unit"),
    ("bias_v,current (V)\n1,2\n", 1, "not a unit of current"),
    ("bias_v;current_a,x\n1;2,3\n", 1, "equally often"),
    ("bias_v current_a\n1 2\n", 1, "separated by spaces"),
])
def test_ambiguity_is_refused_with_file_line_and_suggestion(tmp_path, text, line, fragment):
    path = _write(tmp_path, text)
    with pytest.raises(InputError) as exc:
        read_table(path, ("bias_v", "current_a"))
    problem = exc.value.problems[0]
    assert problem.file == str(path) and problem.line == line
    assert fragment in problem.reason


def test_line_numbers_after_a_quoted_cell_that_spans_lines(tmp_path):
    text = 'bias_v,current_a,remark\n24.5,1e-9,"two\nlines"\n24.6,oops,x\n'
    with pytest.raises(InputError) as exc:
        read_table(_write(tmp_path, text), ("bias_v", "current_a"))
    assert exc.value.problems[0].line == 4 and "not a number" in exc.value.problems[0].reason


def test_latin1_comment_is_read_and_noted_with_its_line(tmp_path):
    path = _write(tmp_path, "# mesuré à 25 °C\nbias_v,current_a\n24.5,1e-9\n24.6,2e-9\n", encoding="latin-1")
    table = read_table(path, ("bias_v", "current_a"))
    assert table.columns["current_a"] == pytest.approx([1e-9, 2e-9])
    assert "line 1 is not UTF-8; the file was read as latin-1" in table.notes
    binary = _write(tmp_path, "bias_v,current_a\n1,\x00\n", name="bin.csv")
    with pytest.raises(InputError, match="NUL byte"):
        read_table(binary, ("bias_v", "current_a"))


def test_semicolon_data_under_a_comma_header_gets_a_hint(tmp_path):
    path = _write(tmp_path, "bias_v,current_a\n24;1e-9\n")
    with pytest.raises(InputError) as exc:
        read_table(path, ("bias_v", "current_a"))
    assert exc.value.problems[0].line == 2


def test_implausible_physical_values_are_refused_with_a_hint(tmp_path):
    kelvin = _write(tmp_path, "bias_v,current_a,temp_c\n24.5,1e-9,298.1\n24.6,2e-9,298.2\n", name="k.csv")
    with pytest.raises(InputError, match="look like kelvin"):
        read_iv(kelvin)
    cold = _write(tmp_path, "bias_v,current_a,temp_c\n24.5,1e-9,-300\n24.6,2e-9,-300\n", name="cold.csv")
    with pytest.raises(InputError, match="below absolute zero"):
        read_iv(cold)
    millivolt = _write(tmp_path, "bias_v,current_a\n24500,1e-9\n24600,2e-9\n", name="mv.csv")
    with pytest.raises(InputError, match="bias_mv"):
        read_iv(millivolt)
    scan = _write(tmp_path, "temp_c,breakdown_v\n300,24.5\n310,24.7\n", name="scan.csv")
    with pytest.raises(InputError, match="kelvin"):
        read_breakdown_scan(scan)


def test_channel_column_is_read_as_text(tmp_path):
    data = read_iv(_write(tmp_path, "bias_v,current_a,channel\n24.5,1e-9,ch07\n24.6,2e-9,ch07\n"))
    assert data.channel == "ch07" and np.allclose(data.current_a, [1e-9, 2e-9])
    with pytest.raises(InputError, match="one I-V curve per file"):
        read_iv(_write(tmp_path, "bias_v,current_a,channel\n24.5,1e-9,a\n24.6,2e-9,b\n", name="two.csv"))


def _plain_and_row_by_row(tmp_path, text, monkeypatch):
    """The same data read by the fast path and (with a trailing comment line) by the row-by-row reader."""
    import compensator.csvio as csvio

    def no_row_by_row(*args):
        raise AssertionError("a plain file must not be read row by row")

    with monkeypatch.context() as patch:
        patch.setattr(csvio, "_rows_of_text", no_row_by_row)
        plain = read_table(_write(tmp_path, text, "plain.csv"), ("bias_v", "current_a"), ("temp_c",))
    slow = read_table(_write(tmp_path, text + "# end of export\n", "slow.csv"), ("bias_v", "current_a"), ("temp_c",))
    return plain, slow


@pytest.mark.parametrize("text", [
    "bias_v,current_ua,temp_c\n24.5,2.5,25\n25.0,7.5e0,25\n25.5, 12.5 ,25\n",
    "# meter export\nVoltage;Current;T\nV;nA;K\n24,5;2,5;298,15\n25;7,5;298,15\n25,5;1,25E1;298,15\n",
    "bias_v\tcurrent_a\textra\r\n24.5\t2.5e-6\tx\r\n25.0\t7.5e-6\ty\r\n25.5\t1.25e-5\tz\r\n",
    "\ufeff# export of a source-measure unit\n\n# sweep 1\nbias_v,current_na\n24.5,2.5\n25.0,7.5\n25.5,12.5\n\n\n",
])
def test_plain_files_read_fast_give_the_same_table(tmp_path, text, monkeypatch):
    plain, slow = _plain_and_row_by_row(tmp_path, text, monkeypatch)
    scale = 1e-9 if "nA" in text or "current_na" in text else 1e-6
    assert plain.columns["bias_v"] == pytest.approx([24.5, 25.0, 25.5], abs=1e-12)
    assert plain.columns["current_a"] == pytest.approx([2.5 * scale, 7.5 * scale, 12.5 * scale], rel=1e-12)
    import compensator.csvio as csvio

    with monkeypatch.context() as patch:  # a large body is parsed from the file itself: the same table
        patch.setattr(csvio, "_LARGE_BODY_CHARS", 0)
        from_file = read_table(tmp_path / "plain.csv", ("bias_v", "current_a"), ("temp_c",))
    for name in slow.columns:
        np.testing.assert_array_equal(plain.columns[name], slow.columns[name])
        np.testing.assert_array_equal(from_file.columns[name], slow.columns[name])
    np.testing.assert_array_equal(plain.lines, slow.lines)
    np.testing.assert_array_equal(from_file.lines, slow.lines)
    assert plain.header_line == slow.header_line and plain.notes == slow.notes and plain.names == slow.names
    assert from_file.notes == slow.notes


@pytest.mark.parametrize("cell, fragment", [("abc", "not a number: 'abc'"), ("nan", "not a finite number"),
                                            ("", "empty cell")])
def test_a_bad_cell_deep_in_a_long_plain_file_is_located(tmp_path, cell, fragment):
    rows = [f"{20 + 1e-4 * i:.4f},{1e-9 * (1 + i):.4e}" for i in range(20000)]
    rows[15000] = f"{20 + 1.5:.4f},{cell}"
    path = _write(tmp_path, "bias_v,current_a\n" + "\n".join(rows) + "\n")
    with pytest.raises(InputError) as exc:
        read_table(path, ("bias_v", "current_a"))
    problem = exc.value.problems[0]
    assert (problem.line, problem.key) == (15002, "current_a") and fragment in problem.reason
