"""Read a YAML profile and validate it against :mod:`compensator.profiles.schema`.

Every problem is reported with the file, the 1-based line, the dotted key
path and a reason; all problems of a file are collected before raising.
"""

from __future__ import annotations

import hashlib
import math
from dataclasses import dataclass
from pathlib import Path

import yaml

from compensator.errors import Problem, ProfileError
from compensator.profiles import schema as S

__all__ = ["MAX_FILE_BYTES", "MAX_NESTING", "MAX_NODES", "MAX_PROBLEMS", "RawProfile", "read_raw_profile"]

#: A profile is a few kilobytes; anything far larger is not one.
MAX_FILE_BYTES = 1 << 20
#: Deepest nesting of mappings and lists accepted (a profile needs two).
MAX_NESTING = 16
#: Most nodes a file may hold once its aliases are expanded (refused before expansion).
MAX_NODES = 20_000
#: Most problems reported per file; the rest are counted in one last line.
MAX_PROBLEMS = 20
#: Longest echo of a user's value or key in a message, characters.
MAX_ECHO = 40
#: Longest number accepted, characters (a float has 17 significant digits).
MAX_NUMBER_CHARS = 40


@dataclass(frozen=True)
class RawProfile:
    """A profile that passed key-level validation.

    Attributes
    ----------
    path : str
        The path as given.
    kind : str
        Profile kind.
    values : dict
        ``{"name": ..., "description": ..., section: {key: value}}``.
    lines : dict
        Dotted key path -> 1-based line, for later cross-key checks.
    sha256 : str
        Hex digest of the file bytes.
    """

    path: str
    kind: str
    values: dict
    lines: dict
    sha256: str

    def problem(self, keypath: str, reason: str) -> Problem:
        """A :class:`Problem` located at ``keypath``'s line."""
        line = self.lines.get(keypath) or self.lines.get(keypath.rsplit(".", 1)[0], 1)
        return Problem(self.path, line, keypath, reason)


_FLOAT_WORDS = {".nan", ".inf", "-.inf", "+.inf", "nan", "inf", "-inf"}


def _line(node) -> int:
    return node.start_mark.line + 1


def _echo(text) -> str:
    """A user's value or key for a message, repr'd and cut to :data:`MAX_ECHO` characters."""
    text = str(text)
    return repr(text) if len(text) <= MAX_ECHO else repr(text[:MAX_ECHO]) + f"... ({len(text)} characters)"


def _capped(problems: list) -> list:
    """At most :data:`MAX_PROBLEMS` problems, then one line counting the rest."""
    if len(problems) <= MAX_PROBLEMS:
        return problems
    last = problems[MAX_PROBLEMS - 1]
    return problems[:MAX_PROBLEMS - 1] + [Problem(last.file, 0, "", f"{len(problems) - MAX_PROBLEMS + 1} more "
                                                                    "problems not shown")]


def _prescan(text: str, path: str) -> None:
    """Refuse deep nesting and alias expansion before anything is built (events are parsed without recursion).

    Each collection's expanded size is counted as its events close; an alias
    counts the size of its anchor, so a nest of aliases is refused from its
    size, never expanded.
    """
    sizes: dict[str, int] = {}
    stack: list[list] = []  # [anchor, size] per open collection
    total = 0
    try:
        for event in yaml.parse(text, Loader=yaml.SafeLoader):
            if isinstance(event, (yaml.MappingStartEvent, yaml.SequenceStartEvent)):
                if len(stack) >= MAX_NESTING:
                    raise ProfileError(Problem(path, event.start_mark.line + 1, "",
                                               f"nesting deeper than {MAX_NESTING} levels"))
                stack.append([event.anchor, 1])
                continue
            if isinstance(event, (yaml.MappingEndEvent, yaml.SequenceEndEvent)):
                anchor, size = stack.pop()
            elif isinstance(event, yaml.ScalarEvent):
                anchor, size = event.anchor, 1
            elif isinstance(event, yaml.AliasEvent):
                anchor, size = None, sizes.get(event.anchor, 1)
            else:
                continue
            if anchor is not None:
                sizes[anchor] = size
            if stack:
                stack[-1][1] += size
            else:
                total += size
            if size > MAX_NODES or (stack and stack[-1][1] > MAX_NODES) or total > MAX_NODES:
                raise ProfileError(Problem(path, event.start_mark.line + 1, "",
                                           f"aliases expand beyond {MAX_NODES} nodes; a profile needs no aliases"))
    except yaml.YAMLError:
        return  # compose reports the syntax error with its line


def _convert(key: S.Key, node, path: str, keypath: str, problems: list):
    """Return the converted scalar, or ``None`` after recording a problem."""
    where = Problem(path, _line(node), keypath, "")
    if not isinstance(node, yaml.ScalarNode):
        problems.append(_with(where, f"expected a {key.kind}, got a {'mapping' if isinstance(node, yaml.MappingNode) else 'list'}"))
        return None
    tag, text = node.tag.rsplit(":", 1)[-1], node.value
    if key.kind in (S.FLOAT, S.INT) and len(text) > MAX_NUMBER_CHARS:
        problems.append(_with(where, f"number too long ({len(text)} characters; at most {MAX_NUMBER_CHARS})"))
        return None
    if key.kind == S.FLOAT:
        if tag in ("int", "float") or tag == "str" and text.strip().lower() not in _FLOAT_WORDS:
            try:
                value = float(text.replace("_", "")) if tag != "int" else float(int(text.replace("_", ""), 0))
            except ValueError:
                problems.append(_with(where, f"expected a number, got {_echo(text)}"))
                return None
        else:
            problems.append(_with(where, f"expected a number, got {_echo(text)}"))
            return None
        if not math.isfinite(value):
            problems.append(_with(where, f"must be finite, got {_echo(text)}"))
            return None
    elif key.kind == S.INT:
        if tag != "int":
            problems.append(_with(where, f"expected a whole number, got {_echo(text)}"))
            return None
        value = int(text.replace("_", ""), 0)
    elif key.kind == S.BOOL:
        if tag != "bool":
            problems.append(_with(where, f"expected true or false, got {_echo(text)}"))
            return None
        value = text.lower() in ("true", "yes", "on", "y")
    else:  # STR and CHOICE
        if tag not in ("str",):
            problems.append(_with(where, f"expected text, got {_echo(text)}"))
            return None
        value = text
        if key.kind == S.CHOICE and value not in key.choices:
            problems.append(_with(where, f"must be one of {', '.join(key.choices)}; got {_echo(value)}"))
            return None
    if key.kind in (S.FLOAT, S.INT):
        for bound, test, words in (
            (key.gt, lambda v, b: v > b, "greater than"),
            (key.ge, lambda v, b: v >= b, "at least"),
            (key.lt, lambda v, b: v < b, "less than"),
            (key.le, lambda v, b: v <= b, "at most"),
        ):
            if bound is not None and not test(value, bound):
                problems.append(_with(where, f"must be {words} {bound:g}, got {text[:MAX_ECHO]}"))
                return None
    return value


def _with(problem: Problem, reason: str) -> Problem:
    return Problem(problem.file, problem.line, problem.key, reason)


def _mapping_items(node, path, keypath, problems):
    """Yield (key string, key line, value node), reporting duplicates and non-mappings."""
    if not isinstance(node, yaml.MappingNode):
        problems.append(Problem(path, _line(node), keypath or "", "expected a mapping of keys"))
        return []
    seen = {}
    items = []
    for key_node, value_node in node.value:
        if not isinstance(key_node, yaml.ScalarNode):
            problems.append(Problem(path, _line(key_node), keypath or "", "a key must be plain text, not a "
                                    f"{'mapping' if isinstance(key_node, yaml.MappingNode) else 'list'}"))
            continue
        name = key_node.value
        if len(name) > MAX_ECHO:
            name = name[:MAX_ECHO] + "..."
        full = f"{keypath}.{name}" if keypath else name
        if name in seen:
            problems.append(Problem(path, _line(key_node), full, f"duplicate key (first on line {seen[name]})"))
            continue
        seen[name] = _line(key_node)
        items.append((name, _line(key_node), value_node))
    return items


def _check_keys(keys, node, path, keypath, variant, problems, lines, fallback_line):
    out = {}
    items = {name: (line, vnode) for name, line, vnode in _mapping_items(node, path, keypath, problems)}
    if variant is None:  # switch missing or invalid (reported on its own): only check what is common
        applicable = [k for k in keys if not k.only_for]
        keys_for_unknown = {k.name for k in keys}
    else:
        applicable = [k for k in keys if not k.only_for or variant in k.only_for]
        keys_for_unknown = None
    known = {k.name for k in applicable}
    for name, (line, _) in items.items():
        if keys_for_unknown is not None and name in keys_for_unknown:
            continue
        if name not in known:
            full = f"{keypath}.{name}" if keypath else name
            others = {k.name for k in keys} - known
            if name in others:
                problems.append(Problem(path, line, full, f"does not apply to {variant!r}"))
            else:
                problems.append(Problem(path, line, full, f"unknown key (allowed: {', '.join(sorted(known))})"))
    for key in applicable:
        full = f"{keypath}.{key.name}" if keypath else key.name
        if key.name in items:
            line, vnode = items[key.name]
            lines[full] = line
            value = _convert(key, vnode, path, full, problems)
            if value is not None:
                out[key.name] = value
        elif key.required:
            problems.append(Problem(path, fallback_line, full, "missing required key"))
        else:
            out[key.name] = key.default
    return out


def read_raw_profile(path: str | Path, expect_kind: str | None = None) -> RawProfile:
    """Read and validate one profile file at the level of keys and values.

    Parameters
    ----------
    path : str or path-like
        The YAML file.
    expect_kind : str, optional
        When given, a profile of another kind is an error.

    Returns
    -------
    RawProfile

    Raises
    ------
    ProfileError
        Listing every problem found, each with file, line, key path and reason.
    """
    path = str(path)
    try:
        data = Path(path).read_bytes()
    except OSError as exc:
        raise ProfileError(Problem(path, 0, "", f"cannot read file: {exc.strerror or exc}")) from None
    if len(data) > MAX_FILE_BYTES:
        raise ProfileError(Problem(path, 0, "", f"file too large for a profile ({len(data)} bytes; at most "
                                                f"{MAX_FILE_BYTES})"))
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise ProfileError(Problem(path, 0, "", f"not UTF-8 text ({exc.reason} at byte {exc.start})")) from None
    _prescan(text, path)
    try:
        root = yaml.compose(text, Loader=yaml.SafeLoader)
    except RecursionError:
        raise ProfileError(Problem(path, 0, "", f"nesting deeper than {MAX_NESTING} levels")) from None
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        line = mark.line + 1 if mark else 0
        reason = (getattr(exc, "problem", None) or type(exc).__name__)[:200]
        raise ProfileError(Problem(path, line, "", f"YAML syntax error: {reason}")) from None
    if root is None:
        raise ProfileError(Problem(path, 1, "", "file is empty; expected a profile mapping with 'kind'"))
    problems: list[Problem] = []
    lines: dict[str, int] = {}
    top_items = {name: (line, vnode) for name, line, vnode in _mapping_items(root, path, "", problems)}
    if problems:
        raise ProfileError(_capped(problems))
    kind_node = top_items.get("kind")
    if kind_node is None:
        raise ProfileError(Problem(path, 1, "kind", f"missing required key (one of {', '.join(S.KINDS)})"))
    kind = _convert(S.TOP_KEYS[0], kind_node[1], path, "kind", problems)
    if kind is None:
        raise ProfileError(_capped(problems))
    if expect_kind and kind != expect_kind:
        raise ProfileError(Problem(path, kind_node[0], "kind", f"expected a {expect_kind!r} profile, got {kind!r}"))
    kind_schema = S.KINDS[kind]
    section_names = {s.name for s in kind_schema.sections}
    top_names = {k.name for k in S.TOP_KEYS}
    values: dict = {}
    for name, (line, _) in top_items.items():
        if name not in section_names | top_names:
            allowed = ", ".join(sorted(section_names | top_names))
            problems.append(Problem(path, line, name, f"unknown key for a {kind!r} profile (allowed: {allowed})"))
    for key in S.TOP_KEYS[1:]:
        if key.name in top_items:
            line, vnode = top_items[key.name]
            lines[key.name] = line
            value = _convert(key, vnode, path, key.name, problems)
            if value is not None:
                values[key.name] = value
        elif key.required:
            problems.append(Problem(path, 1, key.name, "missing required key"))
        else:
            values[key.name] = key.default
    for section in kind_schema.sections:
        if section.name not in top_items:
            if section.required:
                problems.append(Problem(path, 1, section.name, "missing required section"))
            continue
        line, snode = top_items[section.name]
        lines[section.name] = line
        variant = None
        if section.switch:
            switch_key = next(k for k in section.keys if k.name == section.switch)
            entries = {n: v for n, _, v in _mapping_items(snode, path, section.name, [])}
            if section.switch in entries:
                variant = _convert(switch_key, entries[section.switch], path, f"{section.name}.{section.switch}", [])
        values[section.name] = _check_keys(
            section.keys, snode, path, section.name, variant, problems, lines, line
        )
    if problems:
        raise ProfileError(_capped(problems))
    return RawProfile(path, kind, values, lines, hashlib.sha256(data).hexdigest())
