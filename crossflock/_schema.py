"""Generic machinery that turns TOML mappings into frozen dataclasses.

A config section is a frozen, keyword-only dataclass whose fields carry a ``spec`` in their
metadata: the expected kind, a validator and a one-line description. :func:`build` walks
a mapping against such a class, rejects unknown keys with a "did you mean" hint, coerces
lists to tuples and ints to floats, and raises :class:`ConfigError` whose message names the
dotted key, the constraint and the value received.
"""

from __future__ import annotations

import dataclasses
import difflib
import math
from collections.abc import Callable
from typing import Any

from ._errors import ConfigError

__all__ = ["field", "build", "to_mapping", "describe", "fmt_value", "safe_key",
           "unknown_key_error", "MAX_MAGNITUDE"]

# No physical quantity of a scenario needs more; larger numbers are typos or fuzz and
# would overflow the stability estimates.
MAX_MAGNITUDE = 1e9
MAX_INT = 2**63 - 1


def fmt_value(value: Any) -> str:
    """Short, single-line rendering of a received value for error messages."""
    text = repr(value)
    text = text.replace("\n", " ")
    return text if len(text) <= 60 else text[:57] + "..."


def field(default, kind, doc: str, check: Callable | None = None, constraint: str = ""):
    """Dataclass field with a spec used by :func:`build`.

    Parameters
    ----------
    default : object
        Default value (already in its final Python form).
    kind : str or type
        "float", "int", "bool", "str", ("floats", n) for a fixed-length float tuple,
        "floats" for any-length float tuple, ("ints", n), or a dataclass for a nested
        table, ("tables", cls) for an array of tables.
    doc : str
        One-line description (shown by ``validate --explain`` and in the docs).
    check : callable, optional
        Predicate on the coerced value; False raises ``ConfigError`` with ``constraint``.
    constraint : str
        Human-readable constraint, e.g. "must be positive".
    """
    meta = {"kind": kind, "doc": doc, "check": check, "constraint": constraint}
    if isinstance(default, (list, dict)):
        raise TypeError("mutable default")
    if default is None and dataclasses.is_dataclass(kind):
        return dataclasses.field(default_factory=kind, metadata=meta)
    return dataclasses.field(default=default, metadata=meta)


def _is_number(value):
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _coerce(key: str, kind, value):
    if kind == "float":
        if not _is_number(value):
            raise ConfigError(f"`{key}` must be a number (got {fmt_value(value)})")
        value = float(value)
        if not math.isfinite(value):
            raise ConfigError(f"`{key}` must be finite (got {fmt_value(value)})")
        if abs(value) > MAX_MAGNITUDE:
            raise ConfigError(
                f"`{key}` must be at most {MAX_MAGNITUDE:g} in magnitude (got {fmt_value(value)})"
            )
        return value
    if kind == "int":
        if isinstance(value, bool) or not isinstance(value, int):
            if isinstance(value, float) and value.is_integer():
                value = int(value)
            else:
                raise ConfigError(f"`{key}` must be an integer (got {fmt_value(value)})")
        if abs(value) > MAX_INT:
            raise ConfigError(f"`{key}` must fit in 64 bits (got {fmt_value(value)})")
        return value
    if kind == "bool":
        if not isinstance(value, bool):
            raise ConfigError(f"`{key}` must be true or false (got {fmt_value(value)})")
        return value
    if kind == "str":
        if not isinstance(value, str):
            raise ConfigError(f"`{key}` must be a string (got {fmt_value(value)})")
        return value
    if isinstance(kind, tuple) and kind[0] in ("floats", "ints"):
        n = kind[1]
        if not isinstance(value, (list, tuple)):
            raise ConfigError(
                f"`{key}` must be a list of {n} numbers (got {fmt_value(value)})"
            )
        if n is not None and len(value) != n:
            raise ConfigError(
                f"`{key}` must have exactly {n} entries (got {len(value)}: {fmt_value(value)})"
            )
        sub = "float" if kind[0] == "floats" else "int"
        return tuple(_coerce(f"{key}[{i}]", sub, v) for i, v in enumerate(value))
    if kind == "floats":
        return _coerce(key, ("floats", None), value)
    if isinstance(kind, tuple) and kind[0] == "tables":
        cls = kind[1]
        if not isinstance(value, (list, tuple)):
            raise ConfigError(f"`{key}` must be a list of tables (got {fmt_value(value)})")
        return tuple(build(cls, v, f"{key}[{i}]") for i, v in enumerate(value))
    if dataclasses.is_dataclass(kind):
        return build(kind, value, key)
    if callable(kind):  # custom converter: (key, value) -> value
        return kind(key, value)
    raise TypeError(f"unknown kind {kind!r}")  # pragma: no cover - programming error


def safe_key(name: str) -> str:
    """A key as it can be shown on one line (control characters escaped)."""
    name = str(name)
    return name if name.isprintable() and "`" not in name else repr(name)


def unknown_key_error(key: str, name: str, allowed) -> ConfigError:
    """``ConfigError`` for an unknown key, with a close-match hint."""
    hint = difflib.get_close_matches(str(name), list(allowed), n=1, cutoff=0.5)
    name = safe_key(name)
    full = f"{key}.{name}" if key else name
    msg = f"unknown key `{full}`"
    if hint:
        msg += f" (did you mean `{(key + '.') if key else ''}{hint[0]}`?)"
    else:
        msg += f"; allowed: {', '.join(sorted(allowed))}"
    return ConfigError(msg)


def build(cls, mapping, key: str = ""):
    """Build dataclass ``cls`` from ``mapping``, validating every field.

    Parameters
    ----------
    cls : dataclass type
    mapping : dict
        Parsed TOML table (may be partial: missing keys take their defaults).
    key : str
        Dotted prefix of this table, for messages.
    """
    where = f"`{key}`" if key else "the config"
    if isinstance(mapping, cls):
        return mapping
    if not isinstance(mapping, dict):
        raise ConfigError(f"{where} must be a table (got {fmt_value(mapping)})")
    fields = {f.name: f for f in dataclasses.fields(cls)}
    for name in mapping:
        if name not in fields:
            raise unknown_key_error(key, str(name), fields)
    values = {}
    for name, f in fields.items():
        full = f"{key}.{name}" if key else name
        meta = f.metadata
        if name in mapping:
            value = _coerce(full, meta["kind"], mapping[name])
        elif f.default_factory is not dataclasses.MISSING:
            value = f.default_factory()
        else:
            value = f.default
        check = meta.get("check")
        if check is not None and name in mapping and not check(value):
            raise ConfigError(f"`{full}` {meta['constraint']} (got {fmt_value(value)})")
        values[name] = value
    obj = cls(**values)
    post = getattr(obj, "_validate", None)
    if post is not None:
        post(key)
    return obj


def to_mapping(obj) -> dict:
    """Inverse of :func:`build`: a TOML-ready mapping with every key resolved."""
    out = {}
    for f in dataclasses.fields(obj):
        value = getattr(obj, f.name)
        out[f.name] = _plain(value)
    return out


def _plain(value):
    if dataclasses.is_dataclass(value):
        return to_mapping(value)
    if isinstance(value, tuple):
        return [_plain(v) for v in value]
    return value


def describe(cls, prefix: str = "") -> list[tuple[str, object, str]]:
    """(dotted key, default, description) for every key of ``cls``, recursively."""
    rows = []
    for f in dataclasses.fields(cls):
        full = f"{prefix}.{f.name}" if prefix else f.name
        kind = f.metadata.get("kind")
        if dataclasses.is_dataclass(kind):
            rows.extend(describe(kind, full))
        else:
            rows.append((full, _plain(f.default), f.metadata.get("doc", "")))
    return rows
