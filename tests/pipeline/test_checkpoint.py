"""Checkpoints: exact round trips, one-line refusals of damaged or hostile files, full disks.

Damaged files come from truncations and bit flips chosen by hypothesis; hostile ones are built
with h5py (wrong types, missing or extra members, links, non-numeric or compressed datasets,
forged checksums: anyone can compute the checksum). A full disk is simulated by failing os calls
and, for real, by writing to /dev/full and under RLIMIT_FSIZE in a child process.
"""

from __future__ import annotations

import errno
import json
import os
import resource
import shutil
import subprocess
import sys
import zlib
from pathlib import Path
from types import SimpleNamespace

import h5py
import numpy as np
import pytest
import yaml
from hypothesis import given, settings
from hypothesis import strategies as st

from models import get_family
from mps.chain.mpo import build_mpo
from mps.chain.state import product_state
from mps.pipeline import checkpoint
from mps.pipeline.checkpoint import CheckpointError, load_checkpoint, save_checkpoint
from mps.pipeline.cli import main
from mps.pipeline.errors import StorageError
from mps.solver.sweep import Progress, Stage, SweepSettings

from chains import solve

REPO = Path(__file__).parents[2]
XXZ = {"J": 1.0, "Delta": 0.5}


def solved(family="xxz", sites=8, couplings=XXZ, charge=None):
    """(state, progress, rng state) of two sweeps at bond 8 on a small chain."""
    rng = np.random.default_rng(5)
    _, search = solve(family, sites, couplings, charge or {"Sz": 0}, SweepSettings((Stage(8, 2),)), seed=5)
    return search.state, search.progress, rng.bit_generator.state


def assert_same(a, b) -> None:
    assert (a.sites, a.center) == (b.sites, b.center)
    for s, t in zip(a.tensors, b.tensors):
        assert s.legs == t.legs and s.charge == t.charge and s.data.dtype == t.data.dtype
        np.testing.assert_array_equal(s.data, t.data)
    for s, t in zip(a.spectra, b.spectra, strict=True):
        assert (s is None) == (t is None)
        if s is not None:
            assert s.charges == t.charges and len(s.values) == len(t.values)
            for u, v in zip(s.values, t.values):
                np.testing.assert_array_equal(u, v)


def data_ranges(path: Path) -> list[tuple[int, int]]:
    """(start, length) of every dataset's stored bytes in the file."""
    out = []
    with h5py.File(path, "r") as f:
        f.visititems(lambda _, o: out.append((o.id.get_offset(), o.id.get_storage_size()))
                     if isinstance(o, h5py.Dataset) and o.id.get_offset() is not None else None)
    return out


@pytest.fixture(scope="module")
def saved(tmp_path_factory):
    """A checkpoint of a small xxz search, its bytes, what was saved, and its HDF5 structure bytes."""
    state, progress, rng = solved()
    path = tmp_path_factory.mktemp("saved") / "state.h5"
    save_checkpoint(path, state, progress, rng, "model-hash", "solver-hash")
    blob = path.read_bytes()
    inside = np.zeros(len(blob), dtype=bool)
    for start, length in data_ranges(path):
        inside[start:start + length] = True
    return SimpleNamespace(path=path, blob=blob, state=state, progress=progress, rng=rng,
                           structure=np.flatnonzero(~inside).tolist())


@pytest.fixture
def ckpt(saved, tmp_path) -> Path:
    path = tmp_path / "state.h5"
    path.write_bytes(saved.blob)
    return path


def raw(path: Path) -> tuple[dict, dict[str, np.ndarray]]:
    with h5py.File(path, "r") as f:
        arrays = {}
        f.visititems(lambda n, o: arrays.__setitem__(n, o[()]) if isinstance(o, h5py.Dataset) else None)
        return json.loads(f.attrs["meta"]), arrays


def forge(path: Path, meta, arrays: dict[str, np.ndarray]) -> None:
    """Write ``arrays`` and ``meta`` (a dict, or raw text) in the checkpoint layout with a checksum
    that matches them whenever it can be computed, as an adversary would."""
    with h5py.File(path, "w") as f:
        text = meta if isinstance(meta, str) else json.dumps(meta)
        f.attrs["meta"] = text
        f.attrs["checksum"] = "0" * 64 if isinstance(meta, str) else checkpoint._checksum(arrays, meta)
        for key, a in arrays.items():
            f.create_dataset(key, data=a)


def refused(path: Path, match: str | None = None) -> str:
    with pytest.raises(CheckpointError, match=match) as info:
        load_checkpoint(path)
    message = str(info.value)
    assert str(path) in message and "\n" not in message
    return message


# ----------------------------------------------------------------------------- round trips
def product(family, sites, couplings, target):
    fam = get_family(family)
    mpo = build_mpo(fam.space(None), sites, fam.terms(sites, couplings, None))
    return product_state(mpo.phys, sites, target), Progress(), None


@pytest.mark.parametrize("make", [
    lambda: solved(),
    lambda: solved("hubbard", 6, {"t": 1.0, "U": 2.0}, {"N": 6, "Sz": 0}),
    lambda: product("fermions", 7, {"t": 1.0, "V": 0.5}, (3,)),
], ids=["xxz-search", "hubbard-two-charges", "fermion-product-state"])
def test_a_saved_state_comes_back_identical(tmp_path, make):
    state, progress, rng = make()
    save_checkpoint(tmp_path / "s.h5", state, progress, rng, "m", "s")
    back, progress_back, rng_back, meta = load_checkpoint(tmp_path / "s.h5")
    assert_same(back, state)
    assert repr(progress_back) == repr(progress)
    assert rng_back == rng and (meta["model_hash"], meta["solver_hash"]) == ("m", "s")


def test_a_checkpoint_from_before_sweep_warnings_still_loads(ckpt):
    meta, arrays = raw(ckpt)
    for record in meta["history"]:
        del record["warning"]
    forge(ckpt, meta, arrays)
    _, progress, _, _ = load_checkpoint(ckpt)
    assert [r.warning for r in progress.history] == ["", ""]


# ----------------------------------------------------------------------------- damaged files
@settings(max_examples=100, deadline=None)
@given(data=st.data())
def test_a_truncated_checkpoint_is_refused(saved, tmp_path_factory, data):
    cut = data.draw(st.integers(0, len(saved.blob) - 1), label="length")
    path = tmp_path_factory.getbasetemp() / "truncated.h5"
    path.write_bytes(saved.blob[:cut])
    refused(path)


@settings(max_examples=100, deadline=None)
@given(data=st.data())
def test_flipped_bits_are_refused_or_harmless(saved, tmp_path_factory, data):
    # Anywhere in the file, or in its HDF5 structure (outside the arrays, where the checksum
    # cannot see a flip before HDF5 has parsed it).
    where = st.one_of(st.integers(0, len(saved.blob) - 1), st.sampled_from(saved.structure))
    flips = data.draw(st.lists(st.tuples(where, st.integers(0, 7)), min_size=1, max_size=4), label="flips")
    blob = bytearray(saved.blob)
    for offset, bit in flips:
        blob[offset] ^= 1 << bit
    path = tmp_path_factory.getbasetemp() / "flipped.h5"
    path.write_bytes(bytes(blob))
    try:
        state, progress, rng, _ = load_checkpoint(path)
    except CheckpointError as exc:
        assert str(path) in str(exc) and "\n" not in str(exc)
    else:   # the flips hit bytes HDF5 does not use
        assert_same(state, saved.state)
        assert repr(progress) == repr(saved.progress) and rng == saved.rng


def global_heap_free_entry(blob: bytes) -> int:
    """Offset of the free-space entry of the file's global heap collection (HDF5 format: a
    16-byte header, then objects of a 16-byte header and data padded to 8 bytes; index 0 is free)."""
    at = blob.index(b"GCOL")
    p = at + 16
    while int.from_bytes(blob[p:p + 2], "little") != 0:
        p += 16 + -(-int.from_bytes(blob[p + 8:p + 16], "little") // 8) * 8
    return p


def test_a_damaged_global_heap_is_refused_before_hdf5_loops_on_it(saved, ckpt):
    # HDF5 2.0 never returns from reading the text attributes of this file (one bit flipped in
    # the size of the heap's free space); a child process keeps a regression from hanging the tests.
    blob = bytearray(saved.blob)
    entry = global_heap_free_entry(blob) + 8
    size = int.from_bytes(blob[entry:entry + 8], "little")
    blob[entry:entry + 8] = (size - 32).to_bytes(8, "little")
    ckpt.write_bytes(bytes(blob))
    code = ("import sys\nfrom mps.pipeline.checkpoint import CheckpointError, load_checkpoint\n"
            "try:\n    load_checkpoint(sys.argv[1])\nexcept CheckpointError as exc:\n    print(exc)\n")
    res = subprocess.run([sys.executable, "-c", code, str(ckpt)], cwd=REPO, capture_output=True,
                         text=True, timeout=120)
    assert res.returncode == 0 and res.stderr == ""
    assert "global heap" in res.stdout and len(res.stdout.splitlines()) == 1


# ----------------------------------------------------------------------------- hostile meta
DEEP = "[" * 100_000 + "]" * 100_000


@pytest.mark.parametrize("text", [
    "[1, 2, 3]", "42", '"chargewise-checkpoint"', "{not json",
    '{"format": "chargewise-checkpoint", "x": ' + DEEP + "}",
    '{"format": "chargewise-checkpoint", "format_version": 1, "sites": ' + "9" * 5000 + "}",
], ids=["list", "number", "string", "not-json", "deeply-nested", "huge-integer"])
def test_meta_that_is_not_a_meta_record_is_refused(ckpt, text):
    forge(ckpt, text, raw(ckpt)[1])
    refused(ckpt)


def test_meta_that_is_not_utf8_is_refused(ckpt):
    with h5py.File(ckpt, "r+") as f:
        f.attrs.create("meta", np.array(b"\xff\xfe", dtype=h5py.string_dtype("utf-8", 2)))
    refused(ckpt)


def _history(change):
    return lambda m: m["history"][0].update(change)


META_CHANGES = {
    "no-format": lambda m: m.pop("format"),
    "format-version-2": lambda m: m.update(format_version=2),
    "format-version-true": lambda m: m.update(format_version=True),
    "format-version-text": lambda m: m.update(format_version="1"),
    "no-sites": lambda m: m.pop("sites"),
    "no-history": lambda m: m.pop("history"),
    "no-step": lambda m: m.pop("step"),
    "no-model-hash": lambda m: m.pop("model_hash"),
    "sweep-text": lambda m: m.update(sweep="3"),
    "stage-fraction": lambda m: m.update(stage=1.5),
    "converged-text": lambda m: m.update(converged="yes"),
    "converged-int": lambda m: m.update(converged=1),
    "energy-text": lambda m: m.update(energy="low"),
    "sites-negative": lambda m: m.update(sites=-1),
    "sites-zero": lambda m: m.update(sites=0),
    "sites-true": lambda m: m.update(sites=True),
    "sites-1e9": lambda m: m.update(sites=10**9),
    "center-past-the-end": lambda m: m.update(center=m["sites"]),
    "history-dict": lambda m: m.update(history={}),
    "history-number": lambda m: m.update(history=[1]),
    "history-empty-record": lambda m: m.update(history=[{}]),
    "history-energy-text": _history({"energy": "x"}),
    "history-unknown-field": _history({"bogus": 1}),
    "history-missing-field": lambda m: m["history"][0].pop("bond"),
    "rng-list": lambda m: m.update(rng_state=[1, 2]),
    "rng-unknown-generator": lambda m: m.update(rng_state={"bit_generator": "os.system"}),
    "rng-bad-state": lambda m: m["rng_state"].update(state="x"),
    "rng-huge-state": lambda m: m["rng_state"]["state"].update(state=10**100),
}


# ----------------------------------------------------------------------------- hostile arrays
def _set(key, value):
    return lambda a: a.__setitem__(key, value(a[key]) if callable(value) else value)


def _swap_sites(i, j):
    def swap(a):
        moved = {k.replace(f"sites/{i}/", f"sites/{j}/") if k.startswith(f"sites/{i}/")
                 else k.replace(f"sites/{j}/", f"sites/{i}/"): v for k, v in a.items()}
        a.clear()
        a.update(moved)
    return swap


ARRAY_CHANGES = {
    "negative-size": _set("sites/3/leg1_sizes", lambda s: s - 1 - s.max()),
    "sizes-beyond-the-data": _set("sites/3/leg2_sizes", lambda s: s * 10**12),
    "charges-one-dimensional": _set("sites/2/leg0_charges", np.ravel),
    "charges-too-wide": _set("sites/2/leg0_charges", lambda c: np.hstack([c, c])),
    "charges-unsorted": _set("sites/2/leg2_charges", lambda c: c[::-1]),
    "charges-huge": _set("sites/2/leg1_charges", lambda c: c + 2**40),
    "flows": _set("sites/2/flows", np.array([1, -1, 1])),
    "tensor-charge": _set("sites/2/charge", np.array([1])),
    "data-too-long": _set("sites/2/data", lambda d: np.append(d, 0.0)),
    "data-integer": _set("sites/2/data", lambda d: d.astype(np.int64)),
    "data-two-dimensional": _set("sites/2/data", lambda d: d.reshape(-1, 1)),
    "data-scalar": _set("sites/2/data", np.float64(1.0)),
    "bond-charges-shifted": _set("sites/4/leg0_charges", lambda c: c + 2),
    "bond-not-connected": _swap_sites(3, 5),
    "end-leg-charged": _set("sites/0/leg0_charges", lambda c: c + 1),
    "spectrum-sizes": _set("spectra/4/sizes", lambda s: s + 1),
    "spectrum-duplicate-charges": _set("spectra/4/charges", lambda c: np.zeros_like(c)),
    "spectrum-complex": _set("spectra/4/values", lambda v: v.astype(complex)),
    "missing-array": lambda a: a.pop("sites/2/flows"),
    "extra-array": _set("sites/2/extra", np.arange(3)),
    "extra-site": lambda a: a.update({k.replace("sites/7/", "sites/8/"): v for k, v in a.items()
                                      if k.startswith("sites/7/")}),
    "spectrum-of-no-bond": lambda a: a.update({k.replace("spectra/4/", "spectra/99/"): v
                                               for k, v in a.items() if k.startswith("spectra/4/")}),
    "foreign-group": _set("other/x", np.arange(3)),
    "absurdly-many-sectors": lambda a: a.update({
        f"sites/3/leg{i}_{x}": np.arange(2000).reshape(-1, 1) if x == "charges" else np.zeros(2000, int)
        for i in (0, 1) for x in ("charges", "sizes")}),
}


FORGED = {**{f"meta-{k}": (0, c) for k, c in META_CHANGES.items()},
          **{f"arrays-{k}": (1, c) for k, c in ARRAY_CHANGES.items()}}


@pytest.mark.parametrize("part, change", FORGED.values(), ids=FORGED.keys())
def test_forged_checkpoints_are_refused_even_with_a_matching_checksum(ckpt, part, change):
    pieces = raw(ckpt)   # (meta, arrays)
    change(pieces[part])
    forge(ckpt, *pieces)
    refused(ckpt)


def test_absurd_sector_counts_are_refused_before_the_layout_is_built(ckpt, monkeypatch):
    meta, arrays = raw(ckpt)
    ARRAY_CHANGES["absurdly-many-sectors"](arrays)
    forge(ckpt, meta, arrays)
    import mps.blocks.tensor as tensor

    def layout(legs, charge):
        assert max(leg.nsec for leg in legs) < 2000, "layout of the absurd tensor computed"
        return original(legs, charge)

    original = tensor.layout
    monkeypatch.setattr(tensor, "layout", layout)
    refused(ckpt, "absurdly many sectors")


# ----------------------------------------------------------------------------- hostile HDF5
def _replace(name, **dataset):
    def change(f):
        del f[name]
        f.create_dataset(name, **dataset)
    return change


def _link(name, link):
    def change(f):
        del f[name]
        f[name] = link
    return change


def _attr(name, value):
    return lambda f: f.attrs.__setitem__(name, value)


def _refs(f):
    del f["sites/2/data"]
    f.create_dataset("sites/2/data", data=[f.ref, f["sites"].ref], dtype=h5py.ref_dtype)


def _sites_dataset(f):
    del f["sites"]
    f["sites"] = np.arange(8)


HDF5_CHANGES = {
    "no-attributes": lambda f: [f.attrs.__delitem__(k) for k in list(f.attrs)],
    "meta-numeric-array": _attr("meta", np.arange(3)),
    "meta-integer": _attr("meta", 5),
    "meta-array-of-texts": _attr("meta", ["{}", "{}"]),
    "checksum-integer": _attr("checksum", 7),
    "sites-a-dataset": _sites_dataset,
    "soft-link": _link("sites/2/data", h5py.SoftLink("/sites/1/data")),
    "external-link": _link("sites/2/data", h5py.ExternalLink("elsewhere.h5", "/x")),
    "committed-datatype": _link("sites/2/data", np.dtype("f8")),
    "vlen-strings": _replace("sites/2/data", data=["a", "bc"], dtype=h5py.string_dtype()),
    "fixed-bytes": _replace("sites/2/data", data=np.array([b"abc", b"de"])),
    "object-references": _refs,
    "compound": _replace("sites/2/data", data=np.zeros(3, dtype=[("a", "f8"), ("b", "i4")])),
    "vlen-integers": _replace("sites/2/data", shape=(2,), dtype=h5py.vlen_dtype(np.int64)),
    "array-type": _replace("sites/2/data", shape=(3,), dtype=np.dtype(("f8", (2,)))),
    "null-dataspace": _replace("sites/2/data", data=h5py.Empty("f8")),
    "chunked": _replace("sites/2/data", data=np.zeros(40), chunks=(8,)),
    "gzip": _replace("sites/2/data", data=np.zeros(40), compression="gzip"),
    "external-storage": _replace("sites/2/data", shape=(10**8,), dtype="f8",
                                 external=[("/dev/zero", 0, h5py.h5f.UNLIMITED)]),
    "never-written-8GB": _replace("sites/2/data", shape=(10**9,), dtype="f8"),
}


@pytest.mark.parametrize("change", HDF5_CHANGES.values(), ids=HDF5_CHANGES.keys())
def test_foreign_hdf5_members_are_refused_before_any_array_is_read(ckpt, change, monkeypatch):
    with h5py.File(ckpt, "r+") as f:
        change(f)
    reads = []
    original = h5py.Dataset.__getitem__
    monkeypatch.setattr(h5py.Dataset, "__getitem__", lambda d, k: reads.append(d.name) or original(d, k))
    refused(ckpt)
    assert reads == []


def test_a_compressed_bomb_is_refused_without_inflating_it(ckpt, monkeypatch):
    # 10^8 zeros (800 MB) as gzip chunks written directly: under a megabyte on disk.
    chunk = 10**6
    packed = zlib.compress(bytes(8 * chunk), 9)
    with h5py.File(ckpt, "r+") as f:
        del f["sites/2/data"]
        d = f.create_dataset("sites/2/data", shape=(100 * chunk,), dtype="f8", chunks=(chunk,),
                             compression="gzip")
        for k in range(100):
            d.id.write_direct_chunk((k * chunk,), packed)
    assert ckpt.stat().st_size < 2_000_000
    reads = []
    original = h5py.Dataset.__getitem__
    monkeypatch.setattr(h5py.Dataset, "__getitem__", lambda d, k: reads.append(d.name) or original(d, k))
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    refused(ckpt, "filters")
    assert reads == []
    assert resource.getrusage(resource.RUSAGE_SELF).ru_maxrss - peak < 100_000   # kB


def test_arrays_claiming_more_bytes_than_the_file_holds_are_refused(ckpt):
    # Every site's data a hard link to one large dataset: each is stored, together they are not.
    with h5py.File(ckpt, "r+") as f:
        del f["sites/0/data"]
        f["sites/0/data"] = np.zeros(200_000)
        for j in range(1, 8):
            del f[f"sites/{j}/data"]
            f[f"sites/{j}/data"] = f["sites/0/data"]
    refused(ckpt, "claim")


def test_junk_and_empty_files_are_refused(tmp_path):
    for name, content in [("empty.h5", b""), ("junk.h5", b"not hdf5 at all" * 100)]:
        (tmp_path / name).write_bytes(content)
        refused(tmp_path / name, "not a chargewise checkpoint")


# ----------------------------------------------------------------------------- full disks
def _fail(code):
    def fail(*args, **kwargs):
        raise OSError(code, os.strerror(code))
    return fail


def assert_intact(path: Path, saved) -> None:
    assert path.read_bytes() == saved.blob
    assert sorted(p.name for p in path.parent.iterdir()) == [path.name]   # no temporary file left
    assert repr(load_checkpoint(path)[1]) == repr(saved.progress)


def save_next(path: Path, saved) -> None:
    """Save the state of the fixture with one more sweep recorded."""
    progress = Progress(**{**vars(saved.progress), "sweep": saved.progress.sweep + 1})
    save_checkpoint(path, saved.state, progress, saved.rng, "model-hash", "solver-hash")


@pytest.mark.parametrize("call, code", [("fsync", errno.ENOSPC), ("replace", errno.EROFS),
                                        ("replace", errno.EDQUOT), ("fsync", errno.EIO)])
def test_a_refused_save_keeps_the_previous_checkpoint(ckpt, saved, monkeypatch, call, code):
    monkeypatch.setattr(os, call, _fail(code))
    with pytest.raises(StorageError) as info:
        save_next(ckpt, saved)
    message = str(info.value)
    assert str(ckpt) in message and os.strerror(code) in message and "\n" not in message
    assert "previous checkpoint is kept" in message
    assert_intact(ckpt, saved)
    monkeypatch.undo()   # space is back
    save_next(ckpt, saved)
    assert load_checkpoint(ckpt)[1].sweep == saved.progress.sweep + 1


def test_a_refused_first_save_leaves_nothing(saved, tmp_path, monkeypatch):
    monkeypatch.setattr(os, "fsync", _fail(errno.ENOSPC))
    with pytest.raises(StorageError, match="no checkpoint was saved"):
        save_next(tmp_path / "state.h5", saved)
    assert list(tmp_path.iterdir()) == []


def test_a_failure_that_is_not_the_disks_is_not_disguised(ckpt, saved, monkeypatch):
    def bug(*args):
        raise ValueError("a bug")

    monkeypatch.setattr(os, "fsync", bug)
    with pytest.raises(ValueError, match="a bug"):
        save_next(ckpt, saved)
    assert_intact(ckpt, saved)


@pytest.mark.parametrize("code", [errno.EINVAL, errno.EIO])
def test_a_directory_that_cannot_be_synced(ckpt, saved, monkeypatch, code):
    original = os.fsync

    def fsync(fd):
        if os.path.isdir(f"/proc/self/fd/{fd}"):
            raise OSError(code, os.strerror(code))
        original(fd)

    monkeypatch.setattr(os, "fsync", fsync)
    if code == errno.EINVAL:   # the file system cannot sync directories: nothing to report
        save_next(ckpt, saved)
    else:
        with pytest.raises(StorageError, match="directory could not be synced"):
            save_next(ckpt, saved)
    assert load_checkpoint(ckpt)[1].sweep == saved.progress.sweep + 1


@pytest.mark.skipif(not Path("/dev/full").exists(), reason="needs /dev/full")
def test_a_full_device_refuses_the_write(ckpt, saved):
    # The temporary file is made a link to /dev/full, whose writes fail with ENOSPC.
    temp = ckpt.with_name(f".{ckpt.name}.tmp-{os.getpid()}")
    temp.symlink_to("/dev/full")
    with pytest.raises(StorageError, match="No space left on device"):
        save_next(ckpt, saved)
    assert_intact(ckpt, saved)
    save_next(ckpt, saved)
    assert load_checkpoint(ckpt)[1].sweep == saved.progress.sweep + 1


CHILD = """
import resource, signal, sys
from mps.pipeline.checkpoint import load_checkpoint, save_checkpoint
from mps.pipeline.errors import StorageError
state, progress, rng, _ = load_checkpoint(sys.argv[1])
progress.sweep += 1
signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
resource.setrlimit(resource.RLIMIT_FSIZE, (8192, resource.getrlimit(resource.RLIMIT_FSIZE)[1]))
try:
    save_checkpoint(sys.argv[1], state, progress, rng, "model-hash", "solver-hash")
except StorageError as exc:
    print(exc)
"""


def test_a_file_size_limit_refuses_the_write_in_a_real_file(ckpt, saved):
    # RLIMIT_FSIZE makes the kernel refuse writes past 8 kB with EFBIG, as a full disk would.
    res = subprocess.run([sys.executable, "-c", CHILD, str(ckpt)], cwd=REPO, capture_output=True,
                         text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    lines = res.stdout.splitlines()
    assert len(lines) == 1 and os.strerror(errno.EFBIG) in lines[0] and str(ckpt) in lines[0]
    assert_intact(ckpt, saved)
    save_next(ckpt, saved)
    assert load_checkpoint(ckpt)[1].sweep == saved.progress.sweep + 1


# ----------------------------------------------------------------------------- command line
@pytest.fixture(scope="module")
def finished_run(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("cli")
    cfg = {"name": "tiny", "model": {"family": "xxz", "sites": 8, "couplings": XXZ, "charge": {"Sz": 0}},
           "solver": {"stages": [{"bond": 8, "sweeps": 2}]}, "output": {"plots": False}}
    (tmp / "tiny.yaml").write_text(yaml.safe_dump(cfg))
    assert main(["run", str(tmp / "tiny.yaml"), "--out", str(tmp / "run")]) == 0
    return tmp / "run"


def _truncate(path: Path) -> None:
    path.write_bytes(path.read_bytes()[: path.stat().st_size // 2])


def _flip_array_byte(path: Path) -> None:
    start, _ = max(data_ranges(path), key=lambda r: r[1])
    blob = bytearray(path.read_bytes())
    blob[start + 3] ^= 0x10
    path.write_bytes(bytes(blob))


def _compress(path: Path) -> None:
    with h5py.File(path, "r+") as f:
        data = f["sites/2/data"][()]
        del f["sites/2/data"]
        f.create_dataset("sites/2/data", data=data, compression="gzip")


@pytest.mark.parametrize("verb", ["resume", "analyze"])
@pytest.mark.parametrize("damage", [_truncate, _flip_array_byte, _compress],
                         ids=["truncated", "bit-flipped", "compressed"])
def test_the_command_line_refuses_a_damaged_checkpoint_in_one_line(finished_run, tmp_path, capsys,
                                                                    verb, damage):
    run = tmp_path / "run"
    shutil.copytree(finished_run, run)
    damage(run / "state.h5")
    before = (run / "state.h5").read_bytes()
    capsys.readouterr()
    assert main([verb, str(run)]) == 2
    lines = capsys.readouterr().err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("chargewise: ")
    assert str(run / "state.h5") in lines[0] and "Traceback" not in lines[0]
    assert (run / "state.h5").read_bytes() == before
