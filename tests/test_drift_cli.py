"""`compensator drift` and `compensator export` from the command line: numbers, files, and bad input."""

from __future__ import annotations

import csv
import json
import sqlite3

import numpy as np
import pytest

from compensator.drift.synthetic import synthetic_run
from compensator.firmware.faults import FaultFlag
from compensator.logbook import SCHEMA_VERSION, LogbookWriter, write_run
from compensator.logbook.schema import TELEMETRY_COLUMNS

UNITS = {"hut-03": (-0.03, 0.03), "hut-07": (-0.01, -0.015)}


@pytest.fixture(scope="module")
def logbooks(tmp_path_factory):
    folder = tmp_path_factory.mktemp("runs")
    paths = {}
    for k, (unit, (drift, tempco)) in enumerate(UNITS.items()):
        run, _ = synthetic_run(days=4, rate_hz=1 / 60, drift_pct_per_day=drift, tempco_pct_per_k=tempco,
                               dark_peak_every=2, gaps=[(1.2, 1200.0)], restarts=[(2.5, 600.0)],
                               faults=[(1.0, 1800.0, int(FaultFlag.HOT_SIDE_OVER_TEMP))], unit_id=unit, seed=40 + k)
        paths[unit] = folder / f"{unit}.sqlite"
        write_run(paths[unit], run)
    return paths


def test_drift_json_carries_the_figures_with_their_intervals(cli, logbooks):
    result = cli("drift", logbooks["hut-03"], "--json")
    assert result.status == 0, result.stderr
    data = json.loads(result.stdout)
    drift, tempco = UNITS["hut-03"]
    assert data["samples"] == 4 * 1440 - 20 - 10
    assert data["duration_s"] == pytest.approx(4 * 86400 - 60)
    lo, hi = data["drift_ci_pct_per_day"]
    assert lo <= drift <= hi and hi - lo < 0.05
    lo, hi = data["residual_tempco_ci_pct_per_k"]
    assert lo <= tempco <= hi
    assert data["residual_tempco_pct_per_k"] == pytest.approx(tempco, abs=0.005)
    assert data["gain_source"] == "dark_peak_gain"
    assert {c["quantity"] for c in data["allan"]} == {"gain_pct", "bias_v", "temp_k"}
    gain = next(c for c in data["allan"] if c["quantity"] == "gain_pct")
    assert gain["tau_s"][0] == pytest.approx(120.0) and gain["minimum_deviation_in_quantity_unit"] > 0
    assert [g["cause"] for g in data["gaps"]] == ["link_lost", "logger_stopped"]
    assert data["fault_summary"] == [{"fault": "hot_side_over_temp", "intervals": 1, "total_s": 1800.0,
                                      "samples": 30}]
    assert data["sessions"] == 2


def test_drift_table_and_report(cli, logbooks, tmp_path):
    out = tmp_path / "report"
    result = cli("drift", logbooks["hut-03"], "--report", out)
    assert result.status == 0, result.stderr
    assert "drift_pct_per_day" in result.stdout and "hot_side_over_temp" in result.stdout
    page = (out / "drift-report.html").read_text()
    assert page.count("data:image/png;base64,") == 4 and "<script" not in page
    assert "hut-03" in page and "drift_pct_per_day" in page
    for name in ("hut-03-gain.png", "hut-03-tempco.png", "hut-03-allan.png", "hut-03-faults.png"):
        assert (out / name).read_bytes().startswith(b"\x89PNG")
    again = cli("drift", logbooks["hut-03"], "--report", out)
    assert again.status == 2 and "already exists" in again.stderr
    forced = cli("drift", logbooks["hut-03"], "--report", out, "--force")
    assert forced.status == 0
    assert (out / "drift-report.html").read_text() == page          # deterministic


def test_fleet_gives_one_row_per_unit_and_the_spread(cli, logbooks):
    result = cli("drift", logbooks["hut-03"], logbooks["hut-07"], "--json")
    assert result.status == 0, result.stderr
    data = json.loads(result.stdout)
    assert [u["unit_id"] for u in data["unit_reports"]] == ["hut-03", "hut-07"]
    drifts = np.array([u["drift_pct_per_day"] for u in data["unit_reports"]])
    spread = {s["quantity"]: s for s in data["spread"]}["drift_pct_per_day"]
    assert spread["std_in_quantity_unit"] == pytest.approx(drifts.std(ddof=1)) and spread["largest_abs_unit"] == "hut-03"
    for unit in data["unit_reports"]:
        lo, hi = unit["drift_ci_pct_per_day"]
        assert lo <= UNITS[unit["unit_id"]][0] <= hi
    table = cli("drift", logbooks["hut-03"], logbooks["hut-07"])
    assert "std_1sigma" in table.stdout and "hut-07" in table.stdout


def _bad_files(folder):
    text = folder / "notes.sqlite"
    text.write_text("not a database at all\n")
    other = folder / "other.sqlite"
    conn = sqlite3.connect(other)
    conn.execute("CREATE TABLE readings (temp_c REAL)")
    conn.commit()
    conn.close()
    newer = folder / "newer.sqlite"
    write_run(newer, synthetic_run(days=0.05, rate_hz=0.1, seed=1)[0])
    conn = sqlite3.connect(newer)
    conn.execute(f"PRAGMA user_version = {SCHEMA_VERSION + 3}")
    conn.commit()
    conn.close()
    empty = folder / "empty.sqlite"
    from compensator.link.messages import Identity
    with LogbookWriter(empty) as writer:
        writer.start_session(Identity(firmware_version="1", board_name="b", protocol_version=1), unit_id="u",
                             port="p", rate_hz=1.0, started_unix_s=0.0)
    return {"not a SQLite database": text, "not a compensator logbook": other,
            f"schema version {SCHEMA_VERSION + 3} is newer": newer, "no telemetry rows": empty}


@pytest.mark.parametrize("command", ["drift", "export"])
def test_bad_logbooks_one_line_exit_2_nothing_written(cli, tmp_path, command, logbooks):
    for reason, path in _bad_files(tmp_path).items():
        if command == "export" and reason == "no telemetry rows":
            continue                      # an empty run exports as a header-only CSV
        before = path.read_bytes()
        out = tmp_path / "out"
        extra = ["--report", out] if command == "drift" else ["--csv", tmp_path / "out.csv"]
        result = cli(command, logbooks["hut-07"], path, *extra)
        assert result.status == 2, (reason, result.stdout)
        lines = result.stderr.strip().splitlines()
        assert len(lines) == 1 and reason in lines[0] and str(path) in lines[0]
        assert "Traceback" not in result.stderr
        assert path.read_bytes() == before
        assert not out.exists() and not (tmp_path / "out.csv").exists()


def test_drift_usage_errors(cli, logbooks, tmp_path):
    for args in (["--confidence", "nan"], ["--confidence", "1.5"], ["--bin-s", "-3"]):
        result = cli("drift", logbooks["hut-03"], *args)
        assert result.status == 2 and args[0] in result.stderr.strip().splitlines()[-1]
        assert result.stdout == ""
    missing = cli("drift", tmp_path / "absent.sqlite")
    assert missing.status == 2 and "no such file" in missing.stderr


def test_export_csv_has_every_row_and_value(cli, logbooks, tmp_path):
    out = tmp_path / "fleet.csv"
    result = cli("export", logbooks["hut-03"], logbooks["hut-07"], "--csv", out, "--json")
    assert result.status == 0, result.stderr
    summary = json.loads(result.stdout)
    with out.open() as handle:
        rows = list(csv.DictReader(handle))
    conn = sqlite3.connect(logbooks["hut-07"])
    expected = conn.execute("SELECT count(*), sum(sensor_temp_c), sum(dark_peak_gain) FROM telemetry").fetchone()
    conn.close()
    mine = [r for r in rows if r["unit_id"] == "hut-07"]
    assert summary["rows"] == len(rows) and len(mine) == expected[0]
    assert sum(float(r["sensor_temp_c"]) for r in mine) == pytest.approx(expected[1], rel=1e-12)
    assert sum(float(r["dark_peak_gain"]) for r in mine if r["dark_peak_gain"]) == pytest.approx(expected[2])
    assert list(rows[0]) == ["unit_id", "row_id"] + [n for n, _ in TELEMETRY_COLUMNS]
    again = cli("export", logbooks["hut-03"], "--csv", out)
    assert again.status == 2 and "already exists" in again.stderr


def test_export_parquet_partitions_by_unit_and_day_and_duckdb_reads_it(cli, logbooks, tmp_path):
    pytest.importorskip("pyarrow", reason="the Parquet export needs the optional pyarrow extra")
    import pyarrow.dataset as ds

    out = tmp_path / "fleet"
    result = cli("export", logbooks["hut-03"], logbooks["hut-07"], "--parquet", out)
    assert result.status == 0, result.stderr
    assert "8 unit-day partitions" in result.stdout
    assert sorted(p.name for p in out.iterdir()) == ["unit_id=hut-03", "unit_id=hut-07"]
    days = sorted(p.name for p in (out / "unit_id=hut-03").iterdir())
    assert days == ["date_utc=2025-06-15", "date_utc=2025-06-16", "date_utc=2025-06-17", "date_utc=2025-06-18"]
    table = ds.dataset(out, format="parquet", partitioning="hive").to_table()
    conn = sqlite3.connect(logbooks["hut-03"])
    n03 = conn.execute("SELECT count(*) FROM telemetry").fetchone()[0]
    conn.close()
    conn = sqlite3.connect(logbooks["hut-07"])
    n07 = conn.execute("SELECT count(*) FROM telemetry").fetchone()[0]
    conn.close()
    assert table.num_rows == n03 + n07
    assert sorted(set(table.column("unit_id").to_pylist())) == ["hut-03", "hut-07"]
    duckdb = pytest.importorskip("duckdb", reason="duckdb (a test extra) runs the README's query")
    # The README's query, verbatim apart from the folder.
    rows = duckdb.sql(f"""
        SELECT unit_id, count(*) AS samples, round(avg(sensor_temp_c), 3) AS mean_temp_c,
               round(100 * (max(dark_peak_gain) / min(dark_peak_gain) - 1), 3) AS gain_spread_pct
        FROM read_parquet('{out}/**/*.parquet', hive_partitioning = true)
        WHERE faults_live = 0
        GROUP BY unit_id ORDER BY unit_id""").fetchall()
    assert [r[0] for r in rows] == ["hut-03", "hut-07"]
    conn = sqlite3.connect(logbooks["hut-03"])
    ref = conn.execute("SELECT count(*), round(avg(sensor_temp_c), 3) FROM telemetry WHERE faults_live = 0").fetchone()
    conn.close()
    assert rows[0][1:3] == ref
    assert 0 < rows[0][3] < 5
    exists = cli("export", logbooks["hut-03"], "--parquet", out)
    assert exists.status == 2 and "already exists" in exists.stderr
