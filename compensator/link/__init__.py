"""The serial link to the controller board.

``protocol`` holds every message and its layout on the wire; ``codec`` turns
bytes into messages and back without I/O; ``transport`` opens a port by URL
with pyserial; ``client`` is the board API; ``images`` makes the table and
coefficient images a board accepts; ``messages`` holds the records shared
with the simulated board and the logbook (:class:`Telemetry`, :class:`Identity`).
"""

from compensator.link.client import BoardClient, BoardRefused, BoardStatus, FaultState, LinkEvent, LinkTimeout
from compensator.link.codec import NEED_DATA, LinkCodec, LocalProtocolError, ProtocolError, RemoteProtocolError
from compensator.link.images import pid_image, read_image, table_image
from compensator.link.messages import Identity, Telemetry
from compensator.link.transport import SerialTransport

__all__ = ["BoardClient", "BoardRefused", "BoardStatus", "FaultState", "LinkEvent", "LinkTimeout", "NEED_DATA",
           "LinkCodec", "LocalProtocolError", "ProtocolError", "RemoteProtocolError", "pid_image", "read_image",
           "table_image", "Identity", "Telemetry", "SerialTransport"]
