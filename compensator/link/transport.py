"""The serial transport: a port opened by URL with pyserial, timeouts from the baud rate, reconnection with backoff.

``serial_for_url`` accepts a device path (``/dev/ttyUSB0``), a pseudo-terminal
path (as printed by ``compensator board-sim``), ``loop://`` and pyserial's
other URL handlers. Every pyserial or OS error becomes a
:class:`~compensator.errors.LinkError` naming the port.
"""

from __future__ import annotations

import time
from collections.abc import Callable

from compensator.errors import LinkError
from compensator.link.protocol import MAX_ENCODED_BYTES

__all__ = ["SerialTransport", "frame_time_s", "reply_timeout_s", "DEFAULT_BAUD_RATE", "BITS_PER_BYTE",
           "DEFAULT_TURNAROUND_S"]

#: Default line speed, baud.
DEFAULT_BAUD_RATE = 115200
#: Start bit, 8 data bits, stop bit (8N1).
BITS_PER_BYTE = 10
#: Time the board may take between the last byte of a request and the first of its reply, second.
DEFAULT_TURNAROUND_S = 0.05


def frame_time_s(n_bytes: int, baud_rate: float) -> float:
    """Time ``n_bytes`` take on the line at ``baud_rate`` (8N1), second.

    Parameters
    ----------
    n_bytes : int
    baud_rate : float
        Baud.
    """
    return n_bytes * BITS_PER_BYTE / float(baud_rate)


def reply_timeout_s(baud_rate: float, *, turnaround_s: float = DEFAULT_TURNAROUND_S,
                    request_bytes: int = MAX_ENCODED_BYTES, reply_bytes: int = MAX_ENCODED_BYTES) -> float:
    """How long to wait for a reply: both frames on the line, the board's turnaround, and 50 % margin.

    Parameters
    ----------
    baud_rate : float
        Baud.
    turnaround_s : float
        The board's allowance between request and reply, second.
    request_bytes, reply_bytes : int
        Largest frames on the wire, bytes.
    """
    return 1.5 * (frame_time_s(request_bytes + reply_bytes, baud_rate) + turnaround_s)


class SerialTransport:
    """A serial port by URL, with reconnection and an optional hex dump.

    Parameters
    ----------
    url : str
        Device path, pty path or pyserial URL (``loop://``, ...).
    baud_rate : int
        Line speed, baud (ignored by ptys and ``loop://``).
    hexdump : callable, optional
        Called with one line of text per read or write (``"> 0a 1b ..."`` for
        bytes sent, ``"< ..."`` for bytes received): a debugging aid.
    reconnect_timeout_s : float
        How long :meth:`reconnect` keeps trying, second.
    max_backoff_s : float
        Longest wait between reconnection attempts (the wait doubles from 50 ms), second.
    sleep : callable, optional
        ``sleep(seconds)``; tests may pass their own.
    """

    def __init__(self, url: str, *, baud_rate: int = DEFAULT_BAUD_RATE, hexdump: Callable[[str], None] | None = None,
                 reconnect_timeout_s: float = 30.0, max_backoff_s: float = 2.0, sleep=time.sleep):
        if not isinstance(url, str) or not url:
            raise LinkError(f"--port: needs a device path or URL, got {url!r}")
        if not (isinstance(baud_rate, int) and baud_rate > 0):
            raise LinkError(f"baud_rate: needs a positive integer, got {baud_rate!r}")
        self.url = url
        self.baud_rate = baud_rate
        self.hexdump = hexdump
        self.reconnect_timeout_s = float(reconnect_timeout_s)
        self.max_backoff_s = float(max_backoff_s)
        self._sleep = sleep
        self._port = None
        self.reconnects = 0

    # ------------------------------------------------------------------ life cycle
    @property
    def is_open(self) -> bool:
        """Whether the port is open."""
        return self._port is not None and self._port.is_open

    def open(self) -> None:
        """Open the port (a no-op when open).

        Raises
        ------
        LinkError
            The port does not exist or cannot be opened.
        """
        if self.is_open:
            return
        import serial  # the transport is the only module that touches pyserial

        try:
            port = serial.serial_for_url(self.url, baudrate=self.baud_rate, timeout=0, write_timeout=2.0,
                                         do_not_open=True)
            port.open()
        except (serial.SerialException, OSError, ValueError) as exc:
            raise LinkError(f"{self.url}: cannot open the port ({_why(exc)})") from None
        self._port = port

    def close(self) -> None:
        """Close the port (errors on close are ignored: the port may be gone)."""
        port, self._port = self._port, None
        if port is not None:
            try:
                port.close()
            except Exception:  # noqa: BLE001 - a vanished device may fail in many ways on close
                pass

    def reconnect(self) -> float:
        """Close and reopen the port, waiting with exponential backoff until it is back.

        Returns
        -------
        float
            Seconds spent reconnecting.

        Raises
        ------
        LinkError
            The port did not come back within ``reconnect_timeout_s``.
        """
        self.close()
        start = time.monotonic()
        wait = 0.05
        while True:
            try:
                self.open()
                self.reconnects += 1
                return time.monotonic() - start
            except LinkError as exc:
                if time.monotonic() - start + wait > self.reconnect_timeout_s:
                    raise LinkError(f"{self.url}: gone for {self.reconnect_timeout_s:g} s ({exc})") from None
            self._sleep(wait)
            wait = min(2 * wait, self.max_backoff_s)

    def __enter__(self):
        self.open()
        return self

    def __exit__(self, *exc):
        self.close()

    # ------------------------------------------------------------------ I/O
    def write(self, data: bytes) -> None:
        """Send bytes.

        Parameters
        ----------
        data : bytes

        Raises
        ------
        LinkError
            The port is closed or failed.
        """
        if not self.is_open:
            raise LinkError(f"{self.url}: the port is not open")
        if self.hexdump is not None:
            self.hexdump("> " + data.hex(" "))
        try:
            self._port.write(data)
            self._port.flush()
        except Exception as exc:  # noqa: BLE001 - pyserial raises SerialException, OSError or termios.error
            raise LinkError(f"{self.url}: write failed ({_why(exc)})") from None

    def read(self, timeout_s: float) -> bytes:
        """Whatever arrives within ``timeout_s`` (at least one byte, or ``b""`` on timeout).

        Parameters
        ----------
        timeout_s : float
            Second (0 polls).

        Raises
        ------
        LinkError
            The port is closed or failed (e.g. the device was unplugged).
        """
        if not self.is_open:
            raise LinkError(f"{self.url}: the port is not open")
        port = self._port
        try:
            port.timeout = max(0.0, timeout_s)
            data = port.read(1)
            if data:
                waiting = port.in_waiting
                if waiting:
                    data += port.read(waiting)
        except Exception as exc:  # noqa: BLE001
            raise LinkError(f"{self.url}: read failed ({_why(exc)})") from None
        if data and self.hexdump is not None:
            self.hexdump("< " + data.hex(" "))
        return data

    def frame_time_s(self, n_bytes: int) -> float:
        """Line time of ``n_bytes`` at this port's baud rate, second.

        Parameters
        ----------
        n_bytes : int
        """
        return frame_time_s(n_bytes, self.baud_rate)


def _why(exc: BaseException) -> str:
    text = getattr(exc, "strerror", None) or str(exc) or type(exc).__name__
    return text.splitlines()[0]
