"""Records read from a logbook: what the drift analysis and the exports consume.

Pure data (frozen records and numpy arrays); the store in
:mod:`compensator.logbook.store` builds them from the SQLite file.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from enum import Enum

import numpy as np

__all__ = ["EventKind", "SessionRecord", "EventRecord", "RunSeries", "sample_times"]


class EventKind(str, Enum):
    """What an event row records (stored as its lower-case value)."""

    #: The logger opened a session (the board's identity is in ``sessions``).
    SESSION_START = "session_start"
    #: The logger ended a session in an orderly way (absent after a crash).
    SESSION_END = "session_end"
    #: Live fault bits went up (``faults`` holds the new bits).
    FAULT_RAISED = "fault_raised"
    #: Live fault bits went down (``faults`` holds the cleared bits).
    FAULT_CLEARED = "fault_cleared"
    #: The board stopped answering or the port vanished.
    LINK_LOST = "link_lost"
    #: The link came back (``duration_s`` is the length of the outage).
    LINK_RESTORED = "link_restored"
    #: Telemetry arrived later than expected (``duration_s`` is the gap).
    SAMPLES_MISSED = "samples_missed"
    #: A sample with a non-finite value where the schema needs one was not stored (``detail`` says which).
    SAMPLE_REJECTED = "sample_rejected"


@dataclass(frozen=True, kw_only=True)
class SessionRecord:
    """One logger session: one run of ``compensator log`` against one board.

    Attributes
    ----------
    session_id : int
        1, 2, ... in the order the sessions were started.
    started_unix_s : float
        Host clock when the session began, seconds since 1970 (UTC).
    unit_id : str
        Name of the instrument (the board's serial number unless given).
    firmware_version, board_name : str
        From the board's identity.
    protocol_version : int
        Link protocol version the board spoke.
    table_sha256, coefficients_sha256 : str
        Hashes of the lookup table and loop coefficients loaded on the board.
    serial_number : str
        The board's serial number ("" when it has none).
    port : str
        Where the logger listened.
    rate_hz : float
        Telemetry rate the logger asked for (nan when it left the board's own).
    rows : int
        Telemetry rows stored in this session.
    """

    session_id: int
    started_unix_s: float
    unit_id: str
    firmware_version: str
    board_name: str
    protocol_version: int
    table_sha256: str
    coefficients_sha256: str
    serial_number: str
    port: str
    rate_hz: float
    rows: int


@dataclass(frozen=True, kw_only=True)
class EventRecord:
    """One event row (faults, link outages, gaps, session marks).

    Attributes
    ----------
    session_id : int
    time_unix_s : float
        Host clock of the event, seconds since 1970 (UTC).
    kind : EventKind
    faults : int
        Fault bits concerned (0 for non-fault events).
    duration_s : float
        Length of an outage or gap (nan when not applicable).
    detail : str
        Free text (e.g. the link error's message).
    """

    session_id: int
    time_unix_s: float
    kind: EventKind
    faults: int
    duration_s: float
    detail: str


def sample_times(uptime_s, starts, host_at_starts_s) -> np.ndarray:
    """Sample times from the board's uptime, anchored to the host clock at the start of each stretch.

    Parameters
    ----------
    uptime_s : array_like
        Board uptime of every sample, seconds.
    starts : array_like of int
        Index of the first sample of each stretch (sorted, the first one 0):
        each session start and each board restart (uptime going back).
    host_at_starts_s : array_like
        Host clock at those samples, seconds since 1970 (UTC).

    Returns
    -------
    ndarray
        ``host_at_start + (uptime - uptime_at_start)`` of each sample's stretch.
    """
    uptime_s = np.asarray(uptime_s, dtype=float)
    starts = np.asarray(starts, dtype=np.int64)
    stretch = np.zeros(uptime_s.size, dtype=np.int64)
    stretch[starts[1:]] = 1
    stretch = np.cumsum(stretch)
    anchor = np.asarray(host_at_starts_s, dtype=float) - uptime_s[starts]
    return uptime_s + anchor[stretch]


def _empty() -> np.ndarray:
    return np.zeros(0)


@dataclass(frozen=True, kw_only=True)
class RunSeries:
    """The columns of one logbook that the drift analysis needs, as arrays.

    All arrays have one entry per telemetry row, in logging order. Missing
    values (a board without bias read-back, samples without a dark-peak gain)
    are ``nan``.

    Attributes
    ----------
    source : str
        Where the run came from (a path), for messages.
    unit_id : str
        Name of the instrument (of the latest session).
    time_unix_s : ndarray
        Time of each sample, seconds since 1970 (UTC): the host clock at the
        start of the sample's stretch (a session, or the part of one after a
        board restart) plus the board's uptime since then (see
        :func:`sample_times`). The board's clock spaces the samples exactly,
        where host arrival times come in bursts; under a time-scaled
        simulated board it runs in simulated time.
    temp_c : ndarray
        The board's sensor temperature, degree C.
    bias_set_v, bias_measured_v : ndarray
        Commanded and read-back bias, volt.
    overvoltage_target_v : ndarray
        The law's overvoltage target, volt.
    faults_live : ndarray of int64
        Live fault bits per sample.
    dark_peak_gain, dark_peak_gain_err : ndarray
        Gain from the dark-count single-photon peak and its standard error
        (electrons per photoelectron).
    session_index : ndarray of int64
        Index into ``sessions`` of each sample's session.
    sessions : tuple of SessionRecord
    events : tuple of EventRecord
    """

    source: str = ""
    unit_id: str = ""
    time_unix_s: np.ndarray = field(default_factory=_empty)
    temp_c: np.ndarray = field(default_factory=_empty)
    bias_set_v: np.ndarray = field(default_factory=_empty)
    bias_measured_v: np.ndarray = field(default_factory=_empty)
    overvoltage_target_v: np.ndarray = field(default_factory=_empty)
    faults_live: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    dark_peak_gain: np.ndarray = field(default_factory=_empty)
    dark_peak_gain_err: np.ndarray = field(default_factory=_empty)
    session_index: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    sessions: tuple = ()
    events: tuple = ()

    @property
    def samples(self) -> int:
        """Number of telemetry rows."""
        return int(self.time_unix_s.size)
