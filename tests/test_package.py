"""What importing the engine does to the process: the malloc settings of mps/__init__.py."""

from __future__ import annotations

import ctypes
import os

import pytest

import mps

M_TRIM_THRESHOLD, M_MMAP_THRESHOLD = -1, -3     # glibc's mallopt parameters (malloc.h)


class _FakeLibc:
    def __init__(self):
        self.calls = []

        def mallopt(param, value):
            self.calls.append((param, value))
            return 1

        self.mallopt = mallopt


@pytest.fixture
def libc(monkeypatch):
    fake = _FakeLibc()
    monkeypatch.setattr(ctypes, "CDLL", lambda name: fake)
    for key in [k for k in os.environ if k.startswith("MALLOC_") or k == "GLIBC_TUNABLES"]:
        monkeypatch.delenv(key)
    return fake


def test_freed_arrays_stay_on_the_heap(libc):
    mps._keep_freed_memory()
    assert dict(libc.calls) == {M_MMAP_THRESHOLD: 32 << 20, M_TRIM_THRESHOLD: 256 << 20}


@pytest.mark.parametrize("name, value", [("GLIBC_TUNABLES", "glibc.malloc.trim_threshold=0"),
                                         ("MALLOC_ARENA_MAX", "2")])
def test_malloc_settings_of_the_user_are_kept(libc, monkeypatch, name, value):
    monkeypatch.setenv(name, value)
    mps._keep_freed_memory()
    assert libc.calls == []


def test_a_c_library_without_mallopt_is_left_alone(monkeypatch):
    monkeypatch.setattr(ctypes, "CDLL", lambda name: object())
    mps._keep_freed_memory()       # no AttributeError escapes
