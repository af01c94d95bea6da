"""The points of a parameter scan: the ``scan:`` section of a config expanded into ordinary configs.

``scan:`` holds ``grid:`` (dotted config key -> list of values; Cartesian product) and ``paired:``
(dotted keys -> lists of one common length that vary together; one axis of the product). Every
point is the base config with those keys replaced, validated as an ordinary config before any point
runs, so a bad axis (unknown key, empty list, paired lists of unequal length, a value the config
refuses) stops the scan with one line naming the key. Each point gets a readable directory name
built from its values (``Delta=0.5,sites=32``), unique within the scan, and its own seed
(``solver.seed`` + point index unless ``solver.seed`` is itself scanned), so disorder drawn from the
seed is reproducible per point.

A scan is bounded before it is expanded: at most :data:`MAX_POINTS` points, and at most
:data:`MAX_VALUES` values in all the points' configs together (points times the size of the base
config and of its largest scanned values), so that a hostile grid cannot make ``chargewise check``
copy gigabytes.
"""

from __future__ import annotations

import copy
import itertools
import math
import re
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from mps.pipeline.errors import ConfigError
from mps.pipeline.fields import is_int, key_text, section, show
from mps.pipeline.schema import OUTPUT_KEYS

SCAN_KEYS = ("grid", "paired", "warm_start")
MAX_POINTS = 10_000
MAX_VALUES = 2_000_000


@dataclass(frozen=True)
class ScanPoint:
    """One point: its index, its values (dotted key -> value, in axis order), its directory name
    and the full config mapping (the scan section removed, output.dir set to the point's directory)."""

    index: int
    values: dict[str, Any]
    name: str
    config: dict
    position: tuple[int, ...] = ()


def scan_axes(scan: Any) -> list[dict[str, list]]:
    """The axes of the product: one per ``grid`` key, one for all ``paired`` keys together."""
    if not isinstance(scan, Mapping):
        raise ConfigError("scan", f"must be a mapping with keys {', '.join(SCAN_KEYS)}, got {show(scan)}")
    unknown = sorted(map(key_text, set(scan) - set(SCAN_KEYS)))   # keys may be numbers or null
    if unknown:
        raise ConfigError(f"scan.{unknown[0]}", f"is not a scan key; valid: {', '.join(SCAN_KEYS)}")
    axes: list[dict[str, list]] = []
    seen: set[str] = set()
    for part in ("grid", "paired"):
        block = scan.get(part) or {}
        if not isinstance(block, Mapping):
            raise ConfigError(f"scan.{part}", f"must map dotted config keys to lists, got {show(block)}")
        for key, values in block.items():
            where = f"scan.{part}.{key}"
            _check_key(key, where)
            if key in seen:
                raise ConfigError(where, "is scanned twice (in grid and paired)")
            seen.add(key)
            if not isinstance(values, list) or not values:
                raise ConfigError(where, f"must be a non-empty list of values, got {show(values)}")
        if part == "grid":
            axes.extend({key: list(values)} for key, values in block.items())
        elif block:
            lengths = {key: len(values) for key, values in block.items()}
            if len(set(lengths.values())) > 1:
                key = max(lengths, key=lambda k: lengths[k] != next(iter(lengths.values())))
                raise ConfigError(f"scan.paired.{key}", "paired lists must have one common length, got "
                                  + ", ".join(f"{k}: {n}" for k, n in lengths.items()))
            axes.append({key: list(values) for key, values in block.items()})
    if not axes:
        raise ConfigError("scan", "needs at least one axis under grid or paired")
    count = _point_count(axes)
    if count > MAX_POINTS:
        raise ConfigError("scan", f"has {count} points, more than {MAX_POINTS}; split it into smaller scans")
    return axes


def scan_points(data: Mapping[str, Any]) -> list[ScanPoint]:
    """Every point of the scan in ``data`` (a loaded config mapping with a ``scan`` section).

    The returned configs are plain mappings; validate each with ``parse_config`` before running.
    """
    from mps.pipeline.config import check_dir, check_name

    axes = scan_axes(data.get("scan"))
    base = {k: v for k, v in data.items() if k != "scan"}
    count = _point_count(axes)
    size = _size(base, MAX_VALUES // count + 1) + sum(
        max(_size(v, MAX_VALUES) for v in values) for axis in axes for values in axis.values())
    if count * size > MAX_VALUES:
        raise ConfigError("scan", f"{count} points of a config of {size} values make more than {MAX_VALUES} "
                                  "values to check; use fewer points")
    base = copy.deepcopy(base)
    scan_name = check_name(base["name"]) if "name" in base else "scan"
    output = section(base.get("output"), "output", OUTPUT_KEYS)
    out_dir = check_dir(output["dir"]) if "dir" in output else f"runs/{scan_name}"
    seed_scanned = any("solver.seed" in axis for axis in axes)
    points, names = [], set()
    for index, combo in enumerate(itertools.product(*(range(len(next(iter(a.values())))) for a in axes))):
        values = {key: vals[i] for axis, i in zip(axes, combo) for key, vals in axis.items()}
        cfg = copy.deepcopy(base)
        for key, value in values.items():
            _assign(cfg, key, copy.deepcopy(value))
        if not seed_scanned:
            if cfg.get("solver") is None:
                cfg["solver"] = {}
            solver = cfg["solver"]
            if isinstance(solver, dict) and is_int(solver.get("seed", 1)):   # else parse_config refuses it
                solver["seed"] = solver.get("seed", 1) + index
        name = point_name(values, index, names)
        names.add(name)
        cfg.setdefault("output", {})
        cfg["output"] = dict(cfg["output"] or {}, dir=f"{out_dir}/{name}")
        cfg["name"] = f"{scan_name}-{name}"
        points.append(ScanPoint(index, values, name, cfg, tuple(combo)))
    return points


def validate_points(data: Mapping[str, Any], points: list[ScanPoint], default_name: str = "scan") -> list:
    """Every point's config validated (RunConfig records, in point order) before any point runs.

    A refusal that concerns a scanned key is reported under the scan axis that set it, with the
    value, e.g. ``scan.grid.model.couplings.Dleta: value 0.5: unknown key; allowed: ...``; any other
    refusal is one of the base config and keeps its own field name.
    """
    from mps.pipeline.config import parse_config

    parts = {key: part for part in ("grid", "paired") for key in ((data.get("scan") or {}).get(part) or {})}
    configs = []
    for point in points:
        try:
            configs.append(parse_config(point.config, default_name=default_name))
        except ConfigError as exc:
            for key, value in point.values.items():
                if exc.field == key or exc.field.startswith(key + ".") or exc.field.startswith(key + "["):
                    raise ConfigError(f"scan.{parts[key]}.{key}", f"value {show(value)}: {exc.message}") from None
            raise
    return configs


def warm_axis(axes: list[dict[str, list]]) -> int | None:
    """The axis along which points may start from a neighbour's state: the last axis of more than
    one value whose keys are all couplings (sizes, charges and local spaces then agree along it);
    None if there is none."""
    for i in reversed(range(len(axes))):
        keys, values = axes[i], next(iter(axes[i].values()))
        if len(values) > 1 and all(k.startswith("model.couplings.") for k in keys):
            return i
    return None


def warm_sources(points: list[ScanPoint], axes: list[dict[str, list]], workers: int) -> dict[int, int]:
    """point index -> index of the neighbour it starts from (the previous point along the warm axis,
    all other axes equal). Each line of points along that axis is cut into contiguous segments so
    that at least ``workers`` segments run side by side; a segment's first point starts cold."""
    axis = warm_axis(axes)
    if axis is None:
        return {}
    lines: dict[tuple, list[ScanPoint]] = {}
    for p in points:
        lines.setdefault(p.position[:axis] + p.position[axis + 1:], []).append(p)
    per_line = -(-max(workers, 1) // len(lines))
    sources = {}
    for line in lines.values():
        line.sort(key=lambda p: p.position[axis])
        segments = min(per_line, len(line))
        bounds = {round(k * len(line) / segments) for k in range(segments)}
        for j in range(1, len(line)):
            if j not in bounds:
                sources[line[j].index] = line[j - 1].index
    return sources


def point_name(values: Mapping[str, Any], index: int, taken: set[str]) -> str:
    """``Delta=0.5,sites=32``: the last part of each dotted key with its value; lists and mappings
    (stages, per-site couplings) by position; the index is appended if the name repeats."""
    parts = []
    for key, value in values.items():
        short = key.rsplit(".", 1)[-1]
        plain = isinstance(value, (float, str, bool)) or (is_int(value) and value.bit_length() <= 64)
        text = _plain(value[:120] if isinstance(value, str) else value) if plain else f"#{index}"
        parts.append(f"{short}={text}")
    name = re.sub(r"[^A-Za-z0-9_.=,+-]", "_", ",".join(parts))[:120] or f"point{index}"
    return name if name not in taken else f"{name},{index}"


def _plain(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value)


def _point_count(axes: list[dict[str, list]]) -> int:
    """Points of the product of the axes (every key of an axis has the same number of values)."""
    return math.prod(len(next(iter(axis.values()))) for axis in axes)


def _size(node: Any, limit: int) -> int:
    """Values in a loaded config (containers and scalars), counting shared ones each time; stops
    counting past ``limit``."""
    count, todo = 0, [node]
    while todo and count <= limit:
        item = todo.pop()
        count += 1
        if isinstance(item, Mapping):
            todo.extend(item.values())
        elif isinstance(item, list):
            todo.extend(item)
    return count


def _check_key(key: Any, where: str) -> None:
    if not isinstance(key, str) or not re.fullmatch(r"[A-Za-z_][\w+-]*(\.[A-Za-z_^][\w+^-]*)+", key):
        raise ConfigError(where, "must be a dotted config key such as model.couplings.Delta or model.sites")
    if key.split(".")[0] in ("scan", "name", "output"):
        raise ConfigError(where, "cannot be scanned (each point gets its own name and directory)")


def _assign(cfg: dict, dotted: str, value: Any) -> None:
    """cfg[a][b][c] = value for ``a.b.c``, creating missing mappings; refuses to descend into a
    non-mapping (the config validation then names any key the config does not know)."""
    keys = dotted.split(".")
    node = cfg
    for i, key in enumerate(keys[:-1]):
        nxt = node.get(key)
        if nxt is None:
            nxt = node[key] = {}
        if not isinstance(nxt, dict):
            raise ConfigError(f"scan: {dotted}", f"{'.'.join(keys[:i + 1])} is {show(nxt)}, not a mapping")
        node = nxt
    node[keys[-1]] = value


def warm_start_enabled(scan: Mapping[str, Any]) -> bool:
    """``scan.warm_start`` (default true): may points start from a finished neighbour's state?"""
    value = scan.get("warm_start", True)
    if not isinstance(value, bool):
        raise ConfigError("scan.warm_start", f"must be true or false, got {show(value)}")
    return value
