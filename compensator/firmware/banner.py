"""Old import path of :mod:`compensator.provenance` (kept for existing callers)."""

from compensator.provenance import banner_lines, c_banner, inputs_digest

__all__ = ["inputs_digest", "banner_lines", "c_banner"]
