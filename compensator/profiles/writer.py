"""Render profile values back to YAML, in schema order, with units as comments."""

from __future__ import annotations

from compensator.profiles import schema as S

__all__ = ["render_profile"]


def _scalar(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        text = repr(value)
        return text if ("." in text or "e" in text or "inf" in text or "nan" in text) else text + ".0"
    if isinstance(value, int):
        return str(value)
    text = str(value)
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"') + '"'


def render_profile(kind: str, values: dict, header: str = "") -> str:
    """Return the YAML text of a profile.

    Parameters
    ----------
    kind : {"sipm", "board", "thermal"}
    values : dict
        ``{"name": ..., "description": ..., section: {key: value}}`` as kept
        on loaded profiles (``profile.values``).
    header : str
        Comment lines placed at the top (each prefixed with ``# ``).

    Returns
    -------
    str
        YAML that :func:`compensator.profiles.load_profile` reads back to the same values.
    """
    schema = S.KINDS[kind]
    lines = [f"# {h}" if h else "#" for h in header.splitlines()]
    lines.append(f"kind: {kind}")
    lines.append(f"name: {_scalar(values['name'])}")
    if values.get("description"):
        lines.append(f"description: {_scalar(values['description'])}")
    for section in schema.sections:
        if section.name not in values:
            continue
        lines.append(f"{section.name}:")
        given = values[section.name]
        for key in section.keys:
            if key.name not in given or given[key.name] is None:
                continue
            lines.append(f"  {key.name}: {_scalar(given[key.name])}  # {key.doc}")
    return "\n".join(lines) + "\n"
