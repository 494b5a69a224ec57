"""``compensator table``: layouts reported, sweep modes, all-or-nothing output, options checked and refused."""

import csv
import json
from dataclasses import replace

import numpy as np
import pytest

from compensator.firmware.table_c import render_sweep_csv
from compensator.firmware.table_files import prepare_table_files
from compensator.firmware.tables import sweep_table
from compensator.law import build_law


def args(profiles_dir, out, *extra, sipm="hut-sipm-b.yaml", board="hut-board-pt1000.yaml", ov="4"):
    return ("table", "--sipm", profiles_dir / sipm, "--board", profiles_dir / board, "--overvoltage-v", ov,
            "--max-gain-error-pct", "0.05", "--out", out, *extra)


def test_smallest_layout_reported_with_every_candidate(cli, profiles_dir, tmp_path):
    result = cli(*args(profiles_dir, tmp_path / "o", "--json"))
    assert result.status == 0, result.stderr
    data = json.loads(result.stdout)
    layouts = {c["layout"]: c for c in data["layouts"]}
    assert list(layouts) == ["uniform", "segmented", "optimised", "polynomial"]
    assert data["layout"] == "polynomial" and data["table_bytes"] == 10 and data["uniform_table_bytes"] == 26
    assert all(c["within_bound"] and c["max_gain_error_pct"] <= 0.05 for c in layouts.values())
    assert data["table_bytes"] == min(c["table_bytes"] for c in layouts.values())
    assert data["codes_verified"] == data["adc_code_range"][1] - data["adc_code_range"][0] + 1 == 5706
    assert data["safe_state"]["below_breakdown"] and data["safe_state"]["margin_v"] == pytest.approx(6.324, abs=2e-3)
    assert data["findings"] == []


def test_text_lists_layouts_and_the_danger_of_the_ntc_board(cli, profiles_dir, tmp_path):
    result = cli(*args(profiles_dir, tmp_path / "o", sipm="hut-sipm-a.yaml", board="hut-board-ntc.yaml", ov="3"))
    assert result.status == 0, result.stderr
    assert "polynomial           14        6" in result.stdout and "uniform           78       39" in result.stdout
    danger = [line for line in result.stderr.splitlines() if "DANGER" in line]
    assert len(danger) == 1 and "2.258 V above" in danger[0] and "enable (shutdown)" in danger[0]
    assert "NO SAFE DAC CODE" in (tmp_path / "o" / "bias_dac_from_adc.h").read_text()


def test_sweep_none_writes_no_sweep_but_checks_every_code(cli, profiles_dir, tmp_path):
    out = tmp_path / "o"
    result = cli(*args(profiles_dir, out, "--sweep", "none", "--json"))
    assert result.status == 0, result.stderr
    data = json.loads(result.stdout)
    assert data["sweep"] == "none" and data["codes_verified"] == 5706
    assert sorted(p.name for p in out.iterdir()) == ["bias_dac_from_adc.c", "bias_dac_from_adc.h"]


def board_with_adc_bits(board, bits):
    channel = board.temperature
    return replace(board, temperature=replace(channel, front_end=replace(channel.front_end, adc_bits=bits)))


def test_fine_adc_gets_a_summary_sweep_that_still_covers_every_code(sipm_b, board_pt1000):
    board = board_with_adc_bits(board_pt1000, 20)
    law = build_law(sipm_b, board, 4.0)
    built = prepare_table_files(law, board, profiles=[], max_gain_error_pct=0.05, layout="uniform")
    assert built.sweep_mode == "summary" and built.table.code_type_bits == 32
    rows = list(csv.DictReader(built.files["sweep.csv"].splitlines()))
    assert len(rows) <= 1024
    first = [int(r["adc_code_first"]) for r in rows]
    last = [int(r["adc_code_last"]) for r in rows]
    assert first[0] == built.table.code_lo and last[-1] == built.table.code_hi
    assert all(b == a + 1 for a, b in zip(last[:-1], first[1:]))  # consecutive blocks, no code left out
    count = built.table.code_hi - built.table.code_lo + 1
    assert sum(b - a + 1 for a, b in zip(first, last)) == built.sweep.adc_code.size == count == 91285
    worst = max(float(r["max_abs_gain_error_pct"]) for r in rows)
    assert worst == pytest.approx(built.sweep.max_gain_error_pct, abs=1e-6) and worst <= 0.05
    # and the full form is one row per code
    full = render_sweep_csv(built.sweep, mode="full").splitlines()
    assert len(full) == 91285 + 1


def test_summary_block_maximum_by_hand(sipm_b, board_pt1000):
    law = build_law(sipm_b, board_pt1000, 4.0)
    built = prepare_table_files(law, board_pt1000, profiles=[], max_gain_error_pct=0.05, layout="uniform",
                                sweep="summary")
    rows = list(csv.DictReader(built.files["sweep.csv"].splitlines()))
    # 5706 codes in blocks of 8 (the smallest power of two giving at most 1024 rows): 714 rows.
    assert len(rows) == 714
    sweep = sweep_table(built.table, law, board_pt1000)
    block = np.abs(sweep.gain_error_pct[8:16])
    assert float(rows[1]["max_abs_gain_error_pct"]) == pytest.approx(block.max(), abs=1e-6)
    assert int(rows[1]["worst_adc_code"]) == int(sweep.adc_code[8 + np.argmax(block)])


@pytest.mark.parametrize("extra, flag", [
    (("--max-gain-error-pct", "nan"), "--max-gain-error-pct"),
    (("--fault-margin-k", "inf"), "--fault-margin-k"),
    (("--fault-margin-k", "-3"), "--fault-margin-k"),
    (("--name", "abs"), "--name"),
    (("--name", "int"), "--name"),
    (("--prefix", "9x_"), "--prefix"),
    (("--sweep", "some"), "--sweep"),
    (("--drop-correction", "none", "--photon-rate-hz", "1e6"), "--photon-rate-hz"),
])
def test_bad_options_are_one_line_and_write_nothing(cli, profiles_dir, tmp_path, extra, flag):
    out = tmp_path / "o"
    result = cli(*args(profiles_dir, out, *extra))
    assert result.status == 2 and "Traceback" not in result.stderr
    assert flag in result.stderr and "caution" not in result.stderr  # no caution before an argument error
    assert result.stdout == "" and not out.exists()


def test_existing_target_refused_before_any_work(cli, profiles_dir, tmp_path, monkeypatch):
    out = tmp_path / "o"
    out.mkdir()
    (out / "hut_bias.c").write_text("mine\n")
    import compensator.cli.table as command

    def boom(*a, **k):  # the table must not even be built
        raise AssertionError("built although the output exists")

    monkeypatch.setattr(command, "prepare_table_files", boom)
    result = cli(*args(profiles_dir, out, "--name", "bias", "--prefix", "hut_"))
    assert result.status == 2 and "hut_bias.c" in result.stderr and "--force" in result.stderr
    assert sorted(p.name for p in out.iterdir()) == ["hut_bias.c"] and (out / "hut_bias.c").read_text() == "mine\n"


def test_everything_is_rendered_before_one_write_of_the_whole_set(cli, profiles_dir, tmp_path, monkeypatch):
    import compensator.cli.table as command

    calls = []
    real = command.write_files_atomic

    def spy(directory, files, **kw):
        calls.append(sorted(files))
        return real(directory, files, **kw)

    monkeypatch.setattr(command, "write_files_atomic", spy)
    result = cli(*args(profiles_dir, tmp_path / "o", "--name", "bias", "--prefix", "hut_", "--json"))
    assert result.status == 0, result.stderr
    assert calls == [["hut_bias.c", "hut_bias.h", "sweep.csv"]]
    assert json.loads(result.stdout)["c_function"] == "uint16_t hut_bias(uint16_t adc_code)"
