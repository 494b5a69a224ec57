"""Images of a lookup table or loop coefficients for upload to the board.

The protocol carries an image as bytes with its size and CRC-32; what the
bytes mean is the firmware's business. compensator's images (what the
simulated board accepts) are canonical JSON records of the firmware
package's objects: ``{"image": "lookup_table" | "pid_coefficients",
"format": 1, "fields": {...}}`` with sorted keys and no spaces, so the same
table always gives the same bytes and the same SHA-256 (the board reports it
in :class:`~compensator.link.messages.Identity`). A microcontroller usually
compiles the generated C instead; a builder whose firmware accepts uploads
defines its own binary image and keeps this protocol.
"""

from __future__ import annotations

import dataclasses
import enum
import hashlib
import json

import numpy as np

from compensator.errors import LinkError
from compensator.link.protocol import MAX_IMAGE_BYTES

__all__ = ["IMAGE_FORMAT", "table_image", "pid_image", "read_image", "image_sha256", "ImageError"]

#: Version of the image layout.
IMAGE_FORMAT = 1


class ImageError(LinkError, ValueError):
    """An image is not one of ours, or its content is not valid."""


def _plain(value):
    """A JSON-ready form of a record's field: arrays, records, enums and sequences are tagged and nested."""
    if isinstance(value, np.ndarray):
        return {"ndarray": value.tolist(), "dtype": str(value.dtype)}
    if isinstance(value, enum.Enum):
        return {"enum": type(value).__name__, "value": _plain(value.value)}
    if isinstance(value, np.generic):
        return value.item()
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {"record": type(value).__name__,
                "fields": {f.name: _plain(getattr(value, f.name)) for f in dataclasses.fields(value)}}
    if isinstance(value, tuple):
        return {"tuple": [_plain(v) for v in value]}
    if isinstance(value, list):
        return [_plain(v) for v in value]
    if isinstance(value, dict):
        return {"mapping": [[_plain(k), _plain(v)] for k, v in value.items()]}
    return value


def _image(kind: str, record) -> bytes:
    body = {"image": kind, "format": IMAGE_FORMAT,
            "fields": {f.name: _plain(getattr(record, f.name)) for f in dataclasses.fields(record)}}
    data = json.dumps(body, sort_keys=True, separators=(",", ":"), allow_nan=False).encode("ascii")
    if len(data) > MAX_IMAGE_BYTES:
        raise ImageError(f"the {kind.replace('_', ' ')} image has {len(data)} bytes, more than the protocol's "
                         f"{MAX_IMAGE_BYTES}: choose a smaller table")
    return data


#: Modules whose records and enums an image may hold, below ``compensator``.
_RECORD_MODULES = ("findings", "firmware.safe_state", "firmware.layouts", "firmware.lookup_table", "firmware.tables",
                   "firmware.pid", "firmware.pid_settings", "firmware.pid_coefficients")


def table_image(table) -> bytes:
    """The image of a :class:`~compensator.firmware.tables.LookupTable`.

    Parameters
    ----------
    table : LookupTable

    Raises
    ------
    ImageError
        The image would exceed :data:`~compensator.link.protocol.MAX_IMAGE_BYTES`.
    """
    return _image("lookup_table", table)


def pid_image(coefficients) -> bytes:
    """The image of :class:`~compensator.firmware.pid.FixedPidCoefficients`.

    Parameters
    ----------
    coefficients : FixedPidCoefficients
    """
    return _image("pid_coefficients", coefficients)


def _revive(value, types):
    if isinstance(value, list):
        return [_revive(v, types) for v in value]
    if not isinstance(value, dict):
        return value
    if "ndarray" in value:
        return np.asarray(value["ndarray"], dtype=value["dtype"])
    if "tuple" in value:
        return tuple(_revive(v, types) for v in value["tuple"])
    if "mapping" in value:
        return {_revive(k, types): _revive(v, types) for k, v in value["mapping"]}
    name = value.get("record", value.get("enum"))
    cls = types.get(name)
    if cls is None:
        raise ImageError(f"unknown record {name!r} in the image")
    if "enum" in value:
        return cls(_revive(value["value"], types))
    return cls(**{k: _revive(v, types) for k, v in value["fields"].items()})


def read_image(data: bytes):
    """The object an image holds.

    Parameters
    ----------
    data : bytes
        An image from :func:`table_image` or :func:`pid_image`.

    Returns
    -------
    tuple of (str, object)
        ``("lookup_table", LookupTable)`` or ``("pid_coefficients", FixedPidCoefficients)``.

    Raises
    ------
    ImageError
        Not an image of ours, another format version, or fields the objects refuse.
    """
    from compensator.firmware import pid as pid_module
    from compensator.firmware import tables as tables_module

    try:
        body = json.loads(bytes(data).decode("ascii"))
        kind, fmt, fields = body["image"], body["format"], body["fields"]
    except (ValueError, KeyError, TypeError, UnicodeDecodeError) as exc:
        raise ImageError(f"not a compensator image ({exc.__class__.__name__})") from None
    if fmt != IMAGE_FORMAT:
        raise ImageError(f"image format {fmt!r}, this version reads {IMAGE_FORMAT}")
    cls = {"lookup_table": tables_module.LookupTable, "pid_coefficients": pid_module.FixedPidCoefficients}.get(kind)
    if cls is None:
        raise ImageError(f"unknown image kind {kind!r}")
    import importlib

    # Every module whose records an image may hold (the table's and the PID's records live in several modules).
    modules = [importlib.import_module(f"compensator.{name}") for name in _RECORD_MODULES]
    types = {name: obj for module in modules for name, obj in vars(module).items()
             if isinstance(obj, type) and (dataclasses.is_dataclass(obj) or issubclass(obj, enum.Enum))}
    try:
        return kind, cls(**{k: _revive(v, types) for k, v in fields.items()})
    except (TypeError, ValueError, KeyError) as exc:
        raise ImageError(f"the {kind.replace('_', ' ')} image does not hold a valid record: {exc}") from None


def image_sha256(data: bytes) -> str:
    """Hex SHA-256 of an image (what the board reports for what it loaded).

    Parameters
    ----------
    data : bytes
    """
    return hashlib.sha256(data).hexdigest()
