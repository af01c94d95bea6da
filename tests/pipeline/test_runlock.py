"""The run-directory lock: live holders refused by name, dead ones taken over with a message,
holders on other hosts refused with advice, and temporary files of killed writers removed."""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys

import pytest

from mps.pipeline.errors import InputError
from mps.pipeline.runlock import LOCK, RunLock

HOLD = ("import sys, time; from pathlib import Path; from mps.pipeline.runlock import RunLock\n"
        "with RunLock(Path(sys.argv[1])):\n    print('held', flush=True); time.sleep(120)\n")


def _holder(directory):
    proc = subprocess.Popen([sys.executable, "-c", HOLD, str(directory)], stdout=subprocess.PIPE, text=True)
    assert proc.stdout.readline().strip() == "held"
    return proc


def test_a_live_holder_is_refused_by_pid_and_host(tmp_path):
    proc = _holder(tmp_path)
    try:
        with pytest.raises(InputError, match=f"pid {proc.pid} on {socket.gethostname()}"):
            with RunLock(tmp_path):
                pass
    finally:
        proc.kill()
        proc.wait()


def test_a_killed_holder_is_taken_over_with_a_message(tmp_path):
    proc = _holder(tmp_path)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    assert (tmp_path / LOCK).exists()            # a SIGKILLed holder cannot clean up
    said = []
    with RunLock(tmp_path, said.append):
        assert (tmp_path / LOCK).read_text().split() == [str(os.getpid()), socket.gethostname()]
    assert said == [f"taking over the lock of process {proc.pid}, which is no longer running"]
    assert not (tmp_path / LOCK).exists()
    with RunLock(tmp_path, said.append):          # released cleanly: no message the second time
        pass
    assert len(said) == 1


def test_a_holder_on_another_host_is_refused_with_advice(tmp_path):
    (tmp_path / LOCK).write_text("4242 some-other-node\n")
    with pytest.raises(InputError, match="locked by pid 4242 on host some-other-node; if that process has ended, delete"):
        with RunLock(tmp_path):
            pass
    assert (tmp_path / LOCK).read_text() == "4242 some-other-node\n"   # not touched


def test_temporary_files_of_dead_writers_are_removed_live_ones_kept(tmp_path):
    proc = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    try:
        (tmp_path / "plots").mkdir()
        stale = [tmp_path / f".state.h5.tmp-{dead.pid}", tmp_path / "plots" / f".sweeps.png.tmp-{dead.pid}"]
        live = tmp_path / f".sweeps.csv.tmp-{proc.pid}"
        for path in (*stale, live):
            path.write_bytes(b"partial")
        (tmp_path / "state.h5").write_bytes(b"the good one")
        said = []
        with RunLock(tmp_path, said.append):
            pass
        assert not any(p.exists() for p in stale) and live.exists()
        assert (tmp_path / "state.h5").read_bytes() == b"the good one"
        assert any("temporary files" in s for s in said)
    finally:
        proc.kill()
        proc.wait()
