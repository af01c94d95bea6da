"""Typed fields of a YAML document, each checked with a one-line refusal ``<field>: <problem>``.

The config sections (and any later YAML section) read their values through these helpers so that
every refusal has the same shape: the dotted field, what is allowed, and the value as written.
Numbers written as ``1e-10`` (which YAML 1.1 reads as a string) are accepted as numbers; booleans
are never numbers. Values arrive from hostile text, so no helper here is slow or large on any value
the YAML reader lets through (a megabyte string, a 100 000-element list, an integer of thousands of
digits written in hex): integers are bounded to 64 bits, and messages quote at most 60 characters.
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterator, Mapping
from typing import Any

import yaml

from mps.pipeline.errors import ConfigError

# Each digit can be read one way only (no \d+\.?\d*), so a failed match never backtracks quadratically.
_NUMBER = re.compile(r"[-+]?(\d+(\.\d*)?|\.\d+)([eE][-+]?\d+)?")
INT_LIMIT = 2**63 - 1     # every integer field fits a signed 64-bit integer (numpy, HDF5, JSON)
_SHOWN = 60


def section(
    value: Any, where: str, allowed: tuple[str, ...], required: bool = False, what: str = "key"
) -> Mapping[str, Any]:
    """A mapping whose keys are all in ``allowed``; ``None`` means empty unless ``required``."""
    label = where or "config"
    if value is None:
        if required:
            raise ConfigError(label, f"is required (a mapping with keys {', '.join(allowed)})")
        return {}
    if not isinstance(value, Mapping):
        raise ConfigError(
            label, f"must be a mapping with keys {', '.join(allowed)}, got {show(value)}"
        )
    for key in value:
        if key not in allowed:
            path = f"{where}.{key_text(key)}" if where else key_text(key)
            raise ConfigError(path, f"unknown {what}; allowed: {', '.join(sorted(allowed))}")
    return value


def key_text(key: Any) -> str:
    """A mapping key as it appears in a dotted field path (a non-string key as YAML would show it)."""
    if isinstance(key, str):
        text = key if key.isprintable() else show(key)   # a newline, NUL or RTL mark shown escaped
    else:
        text = "null" if key is None else show(key)
    return text if len(text) <= _SHOWN else text[:_SHOWN - 3] + "..."


def is_int(value: Any) -> bool:
    return isinstance(value, int) and not isinstance(value, bool)


def integer(value: Any, where: str, minimum: int, maximum: int = INT_LIMIT) -> int:
    """An integer (not a bool) in ``minimum..maximum``; every integer field has some maximum, at
    most :data:`INT_LIMIT`, so that no later code meets a number it cannot store or print."""
    if not is_int(value) or value < minimum:
        raise ConfigError(where, f"must be an integer >= {minimum}, got {show(value)}")
    if value > maximum:
        raise ConfigError(where, f"must be an integer in {minimum}..{maximum}, got {show(value)}")
    return int(value)


def boolean(raw: Any, where: str) -> bool:
    if not isinstance(raw, bool):
        raise ConfigError(where, f"must be true or false, got {show(raw)}")
    return raw


def real(
    value: Any,
    where: str,
    lo: float | None = None,
    hi: float | None = None,
    lo_open: bool = False,
    hi_open: bool = False,
    finite: bool = True,
) -> float:
    """A real number (not a bool; numeric strings such as "1e-10" accepted) within bounds."""
    if lo is None and hi is None:
        need = "a finite number"
    elif hi is None:
        need = f"a number {'>' if lo_open else '>='} {fmt(lo)}"
    else:
        need = f"a number in {'(' if lo_open else '['}{fmt(lo)}, {fmt(hi)}{')' if hi_open else ']'}"
    x: float | None = None
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        try:
            x = float(value)
        except OverflowError:   # an integer beyond 1.8e308: not a number this program can use
            x = None
    elif isinstance(value, str) and _NUMBER.fullmatch(value.strip()):
        x = float(value)
    bad = x is None or math.isnan(x) or (finite and math.isinf(x))
    if not bad and lo is not None:
        bad = x < lo or (lo_open and x == lo)
    if not bad and hi is not None:
        bad = x > hi or (hi_open and x == hi)
    if bad:
        raise ConfigError(where, f"must be {need}, got {show(value)}")
    return x


def fmt(x: float) -> str:
    """Short text of a number: integers without a decimal point."""
    x = float(x)
    return str(int(x)) if x.is_integer() else repr(x)


def show(value: Any) -> str:
    """How a user-written YAML value is quoted in messages (one line, at most 60 characters)."""
    if isinstance(value, bool):
        text = "true" if value else "false"
    elif value is None:
        text = "nothing (null)"
    elif isinstance(value, float) and math.isnan(value):
        text = ".nan"
    elif isinstance(value, float) and math.isinf(value):
        text = ".inf" if value > 0 else "-.inf"
    else:
        text = "".join(_cut(_pieces(value), 4 * _SHOWN))
    text = " ".join(text.split())
    return text if len(text) <= _SHOWN else text[:_SHOWN - 3] + "..."


def _cut(pieces: Iterator[str], room: int) -> Iterator[str]:
    """The first pieces of a text, stopping once about ``room`` characters are out."""
    for piece in pieces:
        yield piece
        room -= len(piece)
        if room <= 0:
            return


def _pieces(value: Any) -> Iterator[str]:
    """``repr(value)`` piece by piece, so that only what a message shows is ever written out."""
    if is_int(value) and value.bit_length() > 200:   # repr of a long int is slow or refused
        yield f"an integer of about {int(value.bit_length() * math.log10(2)) + 1} digits"
    elif isinstance(value, (str, bytes)):
        yield repr(value[:4 * _SHOWN])
    elif isinstance(value, (list, tuple, set, frozenset, dict)):
        if isinstance(value, (set, frozenset)) and not value:
            yield repr(value)
            return
        brackets = {list: "[]", tuple: "()", dict: "{}"}.get(type(value), "{}")
        yield brackets[0]
        for i, item in enumerate(value):
            yield ", " if i else ""
            yield from _pieces(item)
            if isinstance(value, dict):
                yield ": "
                yield from _pieces(value[item])
        yield "," if isinstance(value, tuple) and len(value) == 1 else ""
        yield brackets[1]
    else:
        yield repr(value)


def kind(value: Any) -> str:
    return {list: "a list", str: "a string"}.get(type(value), f"a {type(value).__name__}")


def yaml_problem(exc: yaml.YAMLError) -> str:
    """One-line description of a YAML error with its line and column."""
    problem = getattr(exc, "problem", None) or str(exc)
    mark = getattr(exc, "problem_mark", None)
    where = f" (line {mark.line + 1}, column {mark.column + 1})" if mark is not None else ""
    return " ".join(f"{problem}{where}".split())
