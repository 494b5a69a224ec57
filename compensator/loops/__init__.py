"""The two control loops: plant models, identification, PID tuning, verification.

No I/O here except :mod:`compensator.loops.measurements` (reads CSV) and
:mod:`compensator.loops.plots` (writes figures).
"""
