"""A user's mistake, on any command, is a short message and exit status 2: never a traceback."""

import pytest

H = "hardware_profiles"

BAD_INVOCATIONS = [
    ("table", "--sipm", f"{H}/hut-sipm-a.yaml", "--board", f"{H}/hut-board-ntc.yaml", "--overvoltage-v", "-3",
     "--max-gain-error-pct", "0.05", "--out", "{tmp}/t"),
    ("table", "--sipm", f"{H}/hut-sipm-a.yaml", "--board", f"{H}/hut-board-ntc.yaml", "--overvoltage-v", "3",
     "--max-gain-error-pct", "nan", "--out", "{tmp}/t"),
    ("budget", "--sipm", f"{H}/hut-sipm-a.yaml", "--board", f"{H}/hut-board-ntc.yaml", "--overvoltage-v", "100"),
    ("budget", "--sipm", f"{H}/hut-board-ntc.yaml", "--board", f"{H}/hut-board-ntc.yaml", "--overvoltage-v", "3"),
    ("budget", "--sipm", f"{H}/hut-sipm-a.yaml", "--board", f"{H}/hut-board-ntc.yaml", "--overvoltage-v", "3",
     "--drop-correction", "measured", "--current-uncertainty-pct", "10"),
    ("table", "--sipm", f"{H}/hut-sipm-b.yaml", "--board", f"{H}/hut-board-pt1000.yaml", "--overvoltage-v", "4",
     "--max-gain-error-pct", "0.05", "--out", "{tmp}/t", "--drop-correction", "measured"),
    ("model", "--sipm", f"{H}/hut-sipm-a.yaml", "--temp-c", "nan", "--bias-v", "27"),
    ("model", "--sipm", f"{H}/hut-sipm-a.yaml", "--temp-c", "25", "--bias-v", "inf"),
    ("model", "--sipm", f"{H}/hut-sipm-a.yaml", "--temp-c", "25", "--overvoltage-v", "3", "--photon-rate-hz", "-1"),
    ("sensor", "--board", f"{H}/hut-board-pt1000.yaml", "--temp-c", "1e9"),
    ("sensor", "--board", f"{H}/hut-board-ntc.yaml", "--temp-c", "-300"),
    ("sensor", "--board", f"{H}/hut-board-ntc.yaml", "--adc-code", "-1"),
    ("tune", "--fopdt", "0", "0", "0", "--method", "simc", "--rate-hz", "10"),
    ("tune", "--fopdt", "1", "10", "1", "--method", "simc", "--rate-hz", "0"),
    ("tune", "--plant", f"{H}/hut-sipm-a.yaml", "--method", "simc"),
    ("identify", "{tmp}/missing.csv"),
    ("identify", f"{H}/hut-sipm-a.yaml"),
    ("calibrate", "iv", "{tmp}/missing.csv"),
    ("calibrate", "spectrum", f"{H}/hut-sipm-a.yaml"),
    ("calibrate", "tempco", "{tmp}/missing.json"),
    ("calibrate", "gain-scan"),
    ("demo", "--step-c", "0"),
    ("demo", "--profiles", "{tmp}"),
    ("profile", "check", "{tmp}/missing.yaml"),
    ("no-such-command",),
]


@pytest.mark.parametrize("argv", BAD_INVOCATIONS, ids=lambda a: " ".join(a[:3]))
def test_bad_input_exits_2_without_traceback(cli, argv, tmp_path, monkeypatch, profiles_dir):
    monkeypatch.chdir(profiles_dir.parent)
    result = cli(*(a.format(tmp=tmp_path) for a in argv))
    # a calibrate batch whose every file failed on input says so per file and exits 2 as well (3 is kept for
    # inputs that were read but could not be analysed)
    assert result.status == 2, (result.stdout, result.stderr)
    assert "Traceback" not in result.stderr
    assert result.stderr.strip(), "the reason must be said on stderr"


def test_budget_refuses_a_board_that_cannot_reach_the_law(cli, profiles_dir):
    # hut-sipm-c at 5 V needs 55.9 to 59.6 V; the NTC board's network reaches 35.19 V at most: as table does,
    # budget refuses (exit 2) instead of printing a figure that cannot be true.
    result = cli("budget", "--sipm", profiles_dir / "hut-sipm-c.yaml", "--board", profiles_dir / "hut-board-ntc.yaml",
                 "--overvoltage-v", "5", "--samples", "200")
    assert result.status == 2 and result.stdout == ""
    assert "the law needs 55.875 to 59.628 V" in result.stderr and "supply maximum output" in result.stderr
    assert len(result.stderr.strip().splitlines()) == 1
