"""The serial link to the controller board.

``messages`` holds the records both ends exchange (shared with the simulated
board and the logbook). The codec (pure bytes <-> messages), the transport
(pyserial ``serial_for_url``) and the client (the board API) live beside it.
"""
