"""Reading a checkpoint file as hostile input (see :mod:`mps.pipeline.checkpoint` for the format).

Anyone can compute the SHA-256 checksum, which only detects corruption, so every layer is checked
before it is used: the global heap holding the text attributes before HDF5 walks it; only known
members, plain hard links of the expected kind, are opened; only numeric arrays and the text
attributes ``meta`` and ``checksum`` are read, and only after refusing filters (a small compressed
dataset can expand enormously), chunked, external or virtual storage and more bytes than the file
holds; meta fields, shapes and leg sizes (bounded by the stored data) are checked before tensors
are built. Every refusal is a :class:`Refused` whose text the caller prefixes with the path.
"""

from __future__ import annotations

import json
import math
import mmap
from dataclasses import MISSING, fields
from pathlib import Path

import h5py
import numpy as np

from mps.blocks.charges import Leg
from mps.blocks.tensor import BlockTensor
from mps.chain.state import BondSpectrum, ChainState
from mps.solver.sweep import SweepRecord

FORMAT = "chargewise-checkpoint"
FORMAT_VERSION = 1
SITE_ARRAYS = frozenset({"data", "flows", "charge",
                         *(f"leg{i}_{x}" for i in range(3) for x in ("charges", "sizes"))})
SPECTRUM_ARRAYS = frozenset({"charges", "sizes", "values"})
# Sector pairs (left x physical) the layout of one site tensor enumerates, about 50 bytes each:
# real states stay far below (a few thousand bond sectors times a few local ones).
MAX_LAYOUT_WORK = 1 << 20
# A leg may hold as many states as the whole stored state has entries, or this many (a large
# local space on a chain whose tensors are smaller than it).
MIN_LEG_LIMIT = 1 << 12
_BIT_GENERATORS = ("PCG64", "PCG64DXSM", "Philox", "SFC64", "MT19937")
# What h5py, json and numpy raise on damaged or hostile input (RecursionError is a RuntimeError,
# UnicodeError a ValueError, h5py's own errors subclass these).
HOSTILE = (OSError, ValueError, LookupError, TypeError, AttributeError, RuntimeError, SystemError,
            ArithmeticError)



class Refused(Exception):
    """Why a checkpoint is refused; the reader prefixes the path."""


def line(text) -> str:
    return " ".join(str(text).split())



def read_file(path: Path) -> tuple[dict, str, dict[str, np.ndarray]]:
    """(meta, stored checksum, arrays by path), reading array data only after every check."""
    size = path.stat().st_size
    _check_heaps(path, size)
    with h5py.File(path, "r") as f:
        meta = _meta(_text_attribute(f, "meta", size))
        stored = _text_attribute(f, "checksum", size)
        datasets = _datasets(f, meta["sites"])
        claimed = sum(_stored_bytes(name, d) for name, d in datasets.items())
        if claimed > size:
            raise Refused(f"refused checkpoint: its arrays claim {claimed} bytes, the file has {size}")
        return meta, stored, {name: np.asarray(d[()]) for name, d in datasets.items()}


def _check_heaps(path: Path, size: int) -> None:
    """Before HDF5 parses the file: refuse one not laid out as h5py writes ours (superblock first,
    8-byte offsets and lengths) or with a damaged global heap collection (HDF5 2.0 loops forever on
    some). The walk is HDF5's (16-byte headers, data padded to 8, free-space entry 0 counting its
    own header); look-alike headers inside array data are left to HDF5, which refuses them if used."""
    if size < 64:
        raise Refused("not a chargewise checkpoint (too short to be an HDF5 file)")
    with open(path, "rb") as fh, mmap.mmap(fh.fileno(), 0, access=mmap.ACCESS_READ) as m:
        widths = (m[13], m[14]) if m[8] < 2 else (m[9], m[10])
        if m[:8] != b"\x89HDF\r\n\x1a\n" or widths != (8, 8):
            raise Refused("not a chargewise checkpoint (not an HDF5 file as chargewise writes them)")
        budget, at = size // 16 + 64, m.find(b"GCOL")
        while at >= 0:
            end, p = at + _u64(m, at + 8), at + 16
            if m[at + 4:at + 8] == b"\x01\0\0\0" and p <= end <= size:
                while p + 16 <= end:
                    n = _u64(m, p + 8)
                    step = n if m[p:p + 2] == b"\0\0" else 16 + (n + 7) // 8 * 8
                    budget -= 1
                    if step < 16 or p + step > end or budget < 0:
                        raise Refused(f"damaged checkpoint (global heap at byte {at} is inconsistent)")
                    p += step
            at = m.find(b"GCOL", at + 4)


def _u64(m, at: int) -> int:
    return int.from_bytes(m[at:at + 8], "little")


def _text_attribute(f: h5py.File, name: str, size: int) -> str:
    if name not in f.attrs:
        raise Refused(f"not a chargewise checkpoint (no '{name}' attribute)")
    attr = f.attrs.get_id(name)
    if attr.shape != () or h5py.check_string_dtype(attr.dtype) is None or attr.get_storage_size() > size:
        raise Refused(f"not a chargewise checkpoint (attribute '{name}' is not a text)")
    value = f.attrs[name]
    return value.decode() if isinstance(value, bytes) else str(value)


_KINDS = {"int": lambda x: type(x) is int, "float": lambda x: type(x) in (int, float),
          "bool": lambda x: type(x) is bool, "str": lambda x: type(x) is str}
_is_count, _is_number = (lambda x: type(x) is int and x >= 0), _KINDS["float"]
_RECORD = {f.name: _KINDS[getattr(f.type, "__name__", f.type)] for f in fields(SweepRecord)}
# Fields added later have defaults; checkpoints written before them lack them.
_RECORD_NEEDS = {f.name for f in fields(SweepRecord) if f.default is MISSING and f.default_factory is MISSING}


def _is_record(r) -> bool:
    return (type(r) is dict and _RECORD_NEEDS <= r.keys() <= _RECORD.keys()
            and all(_RECORD[k](v) for k, v in r.items()))


_META = {
    "model_hash": lambda x: type(x) is str, "solver_hash": lambda x: type(x) is str,
    "sites": lambda x: _is_count(x) and x >= 1, "center": _is_count, "sweep": _is_count,
    "stage": _is_count, "in_stage": _is_count, "step": _is_count,
    "energy": lambda x: x is None or _is_number(x), "step_energy": lambda x: x is None or _is_number(x),
    "step_truncation": _is_number, "step_seconds": _is_number, "converged": _KINDS["bool"],
    "history": lambda h: type(h) is list and all(map(_is_record, h)),
    "rng_state": lambda x: x is None or type(x) is dict,
}


def _meta(text: str) -> dict:
    """The meta record, every field the reader uses present and of its type."""
    meta = json.loads(text)
    if type(meta) is not dict or meta.get("format") != FORMAT:
        raise Refused("not a chargewise checkpoint")
    version = meta.get("format_version")
    if type(version) is not int or version != FORMAT_VERSION:
        raise Refused(f"checkpoint format version {line(repr(version))[:40]} is not supported "
                       f"(this version reads {FORMAT_VERSION})")
    for key, ok in _META.items():
        if key not in meta or not ok(meta[key]):
            raise Refused(f"inconsistent checkpoint (meta field '{key}' is missing or of the wrong type)")
    if meta["center"] >= meta["sites"]:
        raise Refused(f"inconsistent checkpoint (centre {meta['center']} outside {meta['sites']} sites)")
    _check_rng_state(meta["rng_state"])
    return meta


def _check_rng_state(state: dict | None) -> None:
    """A random generator state numpy accepts for one of its bit generators (or none)."""
    if state is None:
        return
    name = state.get("bit_generator")
    try:
        if type(name) is not str or name not in _BIT_GENERATORS:
            raise ValueError(f"unknown bit generator {line(repr(name))[:40]}")
        getattr(np.random, name)().state = state
    except (ValueError, TypeError, LookupError, ArithmeticError, AttributeError) as exc:
        raise Refused(f"inconsistent checkpoint (random generator state: {line(exc)})") from None


def _datasets(f: h5py.File, sites: int) -> dict[str, h5py.Dataset]:
    """The file's datasets by path, which must be exactly those of a chain of ``sites`` sites (and
    the spectra of some of its bonds)."""
    _members(f, "", {"sites", "spectra"}, h5py.Group)
    if "sites" not in f:
        raise Refused("not a chargewise checkpoint (no 'sites' group)")
    out: dict[str, h5py.Dataset] = {}
    groups = f["sites"]
    if len(groups) != sites:
        raise Refused(f"inconsistent checkpoint (meta says {sites} sites, the file holds {len(groups)})")
    numbered = [("sites", groups, {str(j) for j in range(sites)}, SITE_ARRAYS)]
    if "spectra" in f:
        if len(f["spectra"]) > sites + 1:
            raise Refused("inconsistent checkpoint (more bond spectra than bonds)")
        numbered.append(("spectra", f["spectra"], {str(b) for b in range(sites + 1)}, SPECTRUM_ARRAYS))
    for where, parent, numbers, arrays in numbered:
        for n in _members(parent, f"{where}/", numbers, h5py.Group):
            if len(_members(parent[n], f"{where}/{n}/", arrays, h5py.Dataset)) != len(arrays):
                raise Refused(f"inconsistent checkpoint ({where}/{n} lacks some of its arrays)")
            out.update({f"{where}/{n}/{a}": parent[n][a] for a in arrays})
    return out


def _members(group: h5py.Group, where: str, allowed, kind: type) -> list[str]:
    """Names in ``group``, each among ``allowed`` and a plain hard link to a ``kind``."""
    names = list(group.keys())
    for name in names:
        if name not in allowed:
            raise Refused(f"not a chargewise checkpoint (unexpected member '{where}{line(name)[:40]}')")
        if (not isinstance(group.get(name, getlink=True), h5py.HardLink)
                or group.get(name, getclass=True) is not kind):
            raise Refused(f"not a chargewise checkpoint ('{where}{name}' is not a plain {kind.__name__})")
    return names


def _stored_bytes(name: str, d: h5py.Dataset) -> int:
    """Bytes of ``d``, refusing what chargewise never writes: non-numeric element types, filters,
    chunked, external or virtual storage, and data the file does not hold (fill values)."""
    plist = d.id.get_create_plist()
    if (plist.get_nfilters() or plist.get_external_count()
            or plist.get_layout() not in (h5py.h5d.CONTIGUOUS, h5py.h5d.COMPACT)):
        raise Refused(f"refused checkpoint: {name} is stored with filters (compression), chunks or "
                       "external storage, which chargewise never writes")
    if d.shape is None or d.dtype.kind not in "biufc" or d.dtype.subdtype is not None:
        raise Refused(f"refused checkpoint: {name} is not a numeric array ({d.dtype}, shape {d.shape})")
    nbytes = math.prod(d.shape) * d.dtype.itemsize
    if d.id.get_storage_size() != nbytes:
        raise Refused(f"refused checkpoint: {name} claims {nbytes} bytes but stores "
                       f"{d.id.get_storage_size()}")
    return nbytes


def _array(arrays: dict[str, np.ndarray], name: str, kinds: str, ndim: int) -> np.ndarray:
    a = arrays[name]
    if a.dtype.kind not in kinds or a.ndim != ndim:
        what = {"iu": "integer", "fc": "real or complex", "f": "real"}[kinds]
        raise Refused(f"inconsistent checkpoint ({name} must be a {ndim}-dimensional {what} array)")
    return a


def state_from(arrays: dict[str, np.ndarray], meta: dict) -> ChainState:
    sites = meta["sites"]
    entries = sum(arrays[f"sites/{j}/data"].size for j in range(sites))
    tensors = [_site_tensor(arrays, f"sites/{j}/", max(entries, MIN_LEG_LIMIT)) for j in range(sites)]
    first, last = tensors[0].legs[0], tensors[-1].legs[2]
    if first.sizes != (1,) or any(first.charges[0]) or last.sizes != (1,):
        raise Refused("inconsistent checkpoint (the end legs of the chain must be one state, "
                       "the left one of charge 0)")
    for j in range(sites - 1):
        if not tensors[j].legs[2].is_dual_of(tensors[j + 1].legs[0]):
            raise Refused(f"inconsistent checkpoint (bond {j + 1} does not connect its two site tensors)")
    spectra: list[BondSpectrum | None] = [None] * (sites + 1)
    for b in range(sites + 1):
        if f"spectra/{b}/charges" in arrays:
            spectra[b] = _spectrum(arrays, f"spectra/{b}/", first.nq)
    return ChainState(tensors, meta["center"], spectra)


def _site_tensor(arrays: dict[str, np.ndarray], at: str, leg_limit: int) -> BlockTensor:
    """One site tensor, legs (left, physical, right) with flows (+1, +1, -1) and charge 0; leg
    sizes and the layout work are bounded before the layout is computed."""
    flows = _array(arrays, at + "flows", "iu", 1)
    charge = _array(arrays, at + "charge", "iu", 1)
    if flows.tolist() != [1, 1, -1] or charge.any():
        raise Refused(f"inconsistent checkpoint ({at[:-1]} must have flows (+1, +1, -1) and charge 0)")
    legs, dense = [], 1
    for i in range(3):
        charges = _array(arrays, f"{at}leg{i}_charges", "iu", 2)
        sizes = _array(arrays, f"{at}leg{i}_sizes", "iu", 1).tolist()
        if charges.shape != (len(sizes), len(charge)):
            raise Refused(f"inconsistent checkpoint ({at}leg{i} needs one charge vector of length "
                           f"{len(charge)} per sector)")
        if min(sizes, default=0) < 0 or sum(sizes) > leg_limit:
            raise Refused(f"inconsistent checkpoint ({at}leg{i} has sizes below 0 or more states "
                           f"({sum(sizes)}) than the stored data allows ({leg_limit}))")
        legs.append(Leg(tuple(map(tuple, charges.tolist())), tuple(sizes), int(flows[i])))
        dense *= legs[-1].dim
    if legs[0].nsec * legs[1].nsec > MAX_LAYOUT_WORK or dense >= 1 << 62:
        raise Refused(f"inconsistent checkpoint ({at[:-1]} has absurdly many sectors or states)")
    return BlockTensor(tuple(legs), tuple(charge.tolist()), _array(arrays, at + "data", "fc", 1))


def _spectrum(arrays: dict[str, np.ndarray], at: str, nq: int) -> BondSpectrum:
    charges = _array(arrays, at + "charges", "iu", 2)
    sizes = _array(arrays, at + "sizes", "iu", 1).tolist()
    values = _array(arrays, at + "values", "f", 1)
    labels = tuple(map(tuple, charges.tolist()))
    if (charges.shape != (len(sizes), nq) or min(sizes, default=0) < 0 or sum(sizes) != len(values)
            or len(set(labels)) != len(labels)):
        raise Refused(f"inconsistent checkpoint ({at[:-1]}: charges, sizes and values do not match)")
    pieces = tuple(np.split(values, np.cumsum(sizes)[:-1])) if sizes else ()
    return BondSpectrum(labels, pieces)
