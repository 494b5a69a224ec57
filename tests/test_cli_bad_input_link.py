"""Bad input found by the second sweep (tools/bad_input_sweep.py) in log, drift and export: one line, exit 2."""

from __future__ import annotations

from pathlib import Path

import pytest

from compensator.drift.synthetic import synthetic_run
from compensator.logbook import write_run


@pytest.fixture(scope="module")
def logbook(tmp_path_factory):
    path = tmp_path_factory.mktemp("runs") / "hut-03.sqlite"
    run, _ = synthetic_run(days=1, rate_hz=1 / 60, drift_pct_per_day=-0.03, tempco_pct_per_k=0.03, unit_id="hut-03",
                           seed=7)
    write_run(path, run)
    return path


def test_a_telemetry_rate_the_protocol_cannot_carry_is_refused(cli, tmp_path):
    # 1 GHz once rounded to a period of 0 ms, which stops the stream: the logger then recorded nothing, silently.
    result = cli("log", "--port", "loop://", "--db", tmp_path / "run.sqlite", "--rate-hz", "1e9")
    assert result.status == 2 and result.stderr.strip() == (
        "compensator: <command line>: argument --rate-hz: must be at most 1000 Hz, got '1e9' "
        "(see 'compensator log --help')")
    assert list(tmp_path.iterdir()) == []


def test_the_client_refuses_a_period_below_one_millisecond():
    from compensator.errors import LinkError
    from compensator.link.client import BoardClient

    client = BoardClient.__new__(BoardClient)  # the check comes before any traffic
    for period_s in (1e-9, 4e-4, 3601.0, float("nan")):
        with pytest.raises(LinkError, match="needs 0 \\(stop\\) or 0.001 to 3600 s"):
            client.set_telemetry_period(period_s)


def test_drift_refuses_a_bin_width_that_makes_more_bins_than_samples(cli, logbook):
    # One day at one sample a minute: 1440 samples over 86340 s; 1e-9 s bins would be 8.63e13 of them (hundreds of TiB).
    result = cli("drift", logbook, "--bin-s", "1e-9")
    assert result.status == 2 and result.stderr.strip() == (
        f"compensator: {logbook}: bin_s: a bin width of 1e-09 s makes 8.63e+13 bins, more than 100000 (twice the "
        "1440 samples, at least 100000); use at least the sample interval (60 s)")
    assert cli("drift", logbook, "--bin-s", "60").status == 0


def test_a_logbook_named_twice_is_refused(cli, logbook):
    for argv in (("drift", str(logbook), str(logbook.parent / ".." / logbook.parent.name / logbook.name)),
                 ("export", str(logbook), str(logbook), "--csv", str(logbook.parent / "out.csv"))):
        result = cli(*argv)
        assert result.status == 2 and result.stderr.startswith(f"compensator: {argv[2]}: named twice (also as ")
    assert not (logbook.parent / "out.csv").exists()


def test_export_never_writes_over_a_logbook_it_reads(cli, logbook):
    before = logbook.read_bytes()
    result = cli("export", logbook, "--csv", logbook, "--force")
    assert result.status == 2 and result.stderr.strip() == (
        f"compensator: {logbook}: is one of the logbooks read; choose another output")
    assert logbook.read_bytes() == before


def test_simulate_prints_no_caution_with_a_usage_error(cli, tmp_path, monkeypatch):
    # A scheduler nobody runs: the error alone, not the planning caution before it (a short connect timeout).
    from compensator.cli.simulate import CAUTION
    from compensator.sim import montecarlo

    monkeypatch.setattr(montecarlo, "CONNECT_TIMEOUT_S", 1.0)

    scenario = Path(__file__).resolve().parent.parent / "hardware_profiles" / "hut-week-scenario.yaml"
    result = cli("simulate", scenario, "--days", "0.1", "--units", "2", "--scheduler", "tcp://127.0.0.1:1")
    lines = result.stderr.strip().splitlines()
    assert result.status == 2 and len(lines) == 1 and "127.0.0.1:1" in lines[0] and CAUTION not in result.stderr
