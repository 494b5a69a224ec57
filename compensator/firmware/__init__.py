"""Firmware artefacts: integer tables, fixed-point PID, C99 code and their bit-exact Python references."""
