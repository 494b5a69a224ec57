"""Render the key reference of every profile kind as Markdown (for ``hardware_profiles/README.md``)."""

from __future__ import annotations

from compensator.profiles import schema as S

__all__ = ["keys_markdown"]


def _bounds(key: S.Key) -> str:
    parts = []
    for bound, sign in ((key.gt, ">"), (key.ge, ">="), (key.lt, "<"), (key.le, "<=")):
        if bound is not None:
            parts.append(f"{sign} {bound:g}")
    if key.choices:
        parts.append(" / ".join(f"`{c}`" for c in key.choices))
    return ", ".join(parts)


def _need(key: S.Key) -> str:
    if key.required:
        text = "required"
    elif key.default is None:
        text = "optional"
    else:
        text = f"optional, default `{key.default:g}`" if isinstance(key.default, float) else f"optional, default `{key.default}`"
    if key.only_for:
        text += " (only for " + ", ".join(f"`{v}`" for v in key.only_for) + ")"
    return text


def keys_markdown(kinds=None) -> str:
    """Markdown tables of every section and key of the given profile kinds (all by default).

    Parameters
    ----------
    kinds : iterable of str, optional
        Profile kinds to document.

    Returns
    -------
    str
        Markdown text, deterministic.
    """
    out = []
    top = ", ".join(f"`{k.name}` ({k.doc}{'' if k.required else ', optional'})" for k in S.TOP_KEYS)
    out.append(f"Every profile has the top-level keys {top}.\n")
    for kind in kinds or S.KINDS:
        schema = S.KINDS[kind]
        out.append(f"### `kind: {kind}`\n\n{schema.doc}\n")
        for section in schema.sections:
            out.append(f"**`{section.name}`**: {section.doc}\n")
            out.append("| key | meaning and unit | type | bounds | presence |")
            out.append("|---|---|---|---|---|")
            for key in section.keys:
                out.append(f"| `{section.name}.{key.name}` | {key.doc} | {key.kind} | {_bounds(key)} | {_need(key)} |")
            out.append("")
    return "\n".join(out).rstrip() + "\n"
