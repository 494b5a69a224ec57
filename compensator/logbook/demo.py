"""Write a :class:`~compensator.logbook.records.RunSeries` into a logbook (for demos, benchmarks and tests).

The reverse of :func:`~compensator.logbook.store.read_run`: one session per
session of the run, its events, and the samples in chunks. Columns a run
does not carry get plausible fillers (an ADC code from the temperature, a
SiPM current of 1 uA); the latched faults equal the live ones.
"""

from __future__ import annotations

import numpy as np

from compensator.link.messages import Identity
from compensator.logbook.records import RunSeries
from compensator.logbook.store import LogbookWriter

__all__ = ["run_rows", "write_run"]


def run_rows(run: RunSeries, *, start: int = 0, stop: int | None = None):
    """Yield a run's samples as logbook rows (:meth:`LogbookWriter.append_rows` order).

    Parameters
    ----------
    run : RunSeries
    start, stop : int
        Slice of the samples.
    """
    stop = run.samples if stop is None else stop
    t0 = run.time_unix_s[0] if run.samples else 0.0

    def opt(a):
        return [None if not np.isfinite(v) else float(v) for v in a]

    sl = slice(start, stop)
    time_s = run.time_unix_s[sl].tolist()
    temp = run.temp_c[sl].tolist()
    adc = np.clip(np.rint(32768 - 600.0 * run.temp_c[sl]), 0, 65535).astype(int).tolist()
    bias_set = run.bias_set_v[sl].tolist()
    measured = opt(run.bias_measured_v[sl])
    target = run.overvoltage_target_v[sl].tolist()
    faults = run.faults_live[sl].tolist()
    gain, gain_err = opt(run.dark_peak_gain[sl]), opt(run.dark_peak_gain_err[sl])
    for i in range(len(time_s)):
        yield (time_s[i], time_s[i] - t0, adc[i], temp[i], bias_set[i], measured[i], 1.0e-6, None, None,
               target[i], faults[i], faults[i], gain[i], gain_err[i])


def write_run(path, run: RunSeries, *, identity: Identity | None = None, chunk_rows: int = 50_000) -> int:
    """Append a run to a logbook (created when missing); return the rows written.

    Parameters
    ----------
    path : str or path-like
    run : RunSeries
        Its sessions become sessions of the logbook (their identity fields
        unless ``identity`` is given) and its events are written with them.
    identity : Identity, optional
        Board identity for every session.
    chunk_rows : int
        Rows per transaction.
    """
    bounds = np.flatnonzero(np.diff(run.session_index)) + 1
    starts = np.concatenate(([0], bounds)).astype(int)
    stops = np.concatenate((bounds, [run.samples])).astype(int)
    written = 0
    with LogbookWriter(path) as writer:
        for first, last in zip(starts, stops):
            session = run.sessions[int(run.session_index[first])] if run.sessions else None
            ident = identity or Identity(
                firmware_version=session.firmware_version if session else "", board_name=session.board_name
                if session else "", protocol_version=session.protocol_version if session else 1,
                table_sha256=session.table_sha256 if session else "",
                coefficients_sha256=session.coefficients_sha256 if session else "",
                serial_number=session.serial_number if session else "")
            writer.start_session(ident, unit_id=session.unit_id if session else run.unit_id,
                                 port=session.port if session else "", rate_hz=session.rate_hz if session else None,
                                 started_unix_s=float(run.time_unix_s[first]))
            t_first, t_last = float(run.time_unix_s[first]), float(run.time_unix_s[last - 1])
            for event in run.events:
                if t_first <= event.time_unix_s <= t_last + 1e-9:
                    writer.record_event(event.kind, host_time_unix_s=event.time_unix_s, faults=event.faults,
                                        duration_s=None if not np.isfinite(event.duration_s) else event.duration_s,
                                        detail=event.detail)
            for start in range(first, last, chunk_rows):
                writer.append_rows(run_rows(run, start=start, stop=min(last, start + chunk_rows)))
                written += writer.flush()
            writer.end_session(host_time_unix_s=t_last)
    return written
