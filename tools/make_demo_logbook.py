"""Write seeded synthetic logbooks of a few mountain-hut monitors (invented data, for demos only).

    python tools/make_demo_logbook.py DIR [--days 14] [--rate-hz 0.1] [--units 3]

Each unit gets DIR/hut-NN.sqlite with a known drift and residual temperature
coefficient (listed in DIR/truth.json), a link outage, a logger restart (a
second session) and a short sensor fault, so that `compensator drift` and
`compensator export` have something real-looking to chew on.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from compensator.drift.synthetic import synthetic_run
from compensator.firmware.faults import FaultFlag
from compensator.link.messages import Identity
from compensator.logbook.demo import write_run

UNITS = [("hut-03", -0.020, 0.030), ("hut-07", -0.008, -0.012), ("hut-11", -0.045, 0.055), ("hut-12", 0.004, 0.010)]


def write_unit(path: Path, unit_id: str, *, days: float, rate_hz: float, drift: float, tempco: float, seed: int):
    run, truth = synthetic_run(days=days, rate_hz=rate_hz, drift_pct_per_day=drift, tempco_pct_per_k=tempco,
                               gaps=[(days * 0.4, 1800.0)], restarts=[(days * 0.7, 600.0)],
                               faults=[(days * 0.2, 900.0, int(FaultFlag.SENSOR_RATE))],
                               dark_peak_every=10, unit_id=unit_id, seed=seed)
    identity = Identity(firmware_version="1.4.0", board_name="hut-board-ntc", protocol_version=1,
                        table_sha256="9f" * 32, coefficients_sha256="4c" * 32, serial_number=unit_id)
    write_run(path, run, identity=identity)
    return truth


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("directory")
    parser.add_argument("--days", type=float, default=14.0)
    parser.add_argument("--rate-hz", type=float, default=0.1)
    parser.add_argument("--units", type=int, default=3, choices=range(1, len(UNITS) + 1))
    args = parser.parse_args(argv)
    out = Path(args.directory)
    out.mkdir(parents=True, exist_ok=True)
    truth = []
    for k, (unit_id, drift, tempco) in enumerate(UNITS[:args.units]):
        path = out / f"{unit_id}.sqlite"
        if path.exists():
            print(f"make_demo_logbook: {path}: already exists; not overwriting", file=sys.stderr)
            return 2
        write_unit(path, unit_id, days=args.days, rate_hz=args.rate_hz, drift=drift, tempco=tempco, seed=k + 1)
        truth.append({"unit_id": unit_id, "file": path.name, "drift_pct_per_day": drift,
                      "residual_tempco_pct_per_k": tempco})
        print(f"{path}: {unit_id}, {args.days:g} days at {args.rate_hz:g} Hz (invented data)")
    (out / "truth.json").write_text(json.dumps({"units": truth}, indent=2) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
