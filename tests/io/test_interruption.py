"""Tests of algorithms.io.interruption: files of killed runs are cleared, a terminated run undoes its files."""
from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
import threading
import time
from pathlib import Path

import pytest

from fault_injection import names
from fieldcast.algorithms import Cancelled, OutputSet, remove_stale_files, termination_cleanup
from fieldcast.algorithms.io import interruption
from fieldcast.algorithms.io.atomic import write_text_atomically

REPO_ROOT = Path(__file__).resolve().parents[2]


def dead_pid() -> int:
    """The id of a process that has ended."""
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()
    return child.pid


def test_stale_files_of_a_dead_run_are_cleared_and_live_ones_kept(tmp_path):
    dead, own = dead_pid(), os.getpid()
    (tmp_path / "zinc.tif").write_text("new, from the killed run")
    stale = {f".zinc.tif.fieldcast-{dead}-0123456789ab.part": "partial",
             f".zinc.tif.fieldcast-{dead}-0123456789ab.part.aux.xml": "partial side file",
             f".zinc.tif.fieldcast-{dead}-ba9876543210.keep": "earlier raster"}
    live = {f".copper.tif.fieldcast-{own}-0123456789ab.part": "being written",
            ".copper.tif.fieldcast-0123456789ab.part": "no pid, young",
            f".notes.txt.fieldcast-{dead}-0123456789ab.part~": "not our exact name",
            f"zinc.tif.fieldcast-{dead}-0123456789ab.part": "not hidden: not ours"}
    for name, text in {**stale, **live}.items():
        (tmp_path / name).write_text(text)
    assert remove_stale_files(str(tmp_path), before=time.time() - 3600) == []  # all changed since: kept
    done = remove_stale_files(str(tmp_path), before=time.time() + 1)
    assert len(done) == 3
    assert f".zinc.tif.fieldcast-{dead}-ba9876543210.keep restored as {tmp_path / 'zinc.tif'}" in done
    assert names(tmp_path) == sorted([*live, "zinc.tif"])
    assert (tmp_path / "zinc.tif").read_text() == "earlier raster"


def test_a_staging_file_without_a_process_id_is_cleared_when_old(tmp_path):
    old = tmp_path / ".zinc.tif.fieldcast-0123456789ab.part"
    old.write_text("left by an earlier version")
    week_ago = time.time() - 7 * 24 * 3600
    os.utime(old, (week_ago, week_ago))
    assert remove_stale_files(str(tmp_path), before=time.time() + 1) == [f"{old.name} removed"]
    assert names(tmp_path) == []
    assert remove_stale_files(str(tmp_path / "missing")) == []


def test_sigterm_undoes_the_run_and_chains_to_the_previous_python_handler(tmp_path):
    earlier = tmp_path / "table.csv"
    earlier.write_text("earlier table\n")
    received = []

    def recorder(signum, frame):
        received.append(signum)

    previous = signal.signal(signal.SIGTERM, recorder)
    try:
        with pytest.raises(Cancelled, match="Terminated"), termination_cleanup() as installed, \
                OutputSet() as outputs:
            assert installed
            write_text_atomically(tmp_path / "zinc.json", "{}", "the model file")
            outputs.protect(str(earlier))
            earlier.write_text("half")
            os.kill(os.getpid(), signal.SIGTERM)
        assert received == [signal.SIGTERM]
        assert names(tmp_path) == ["table.csv"] and earlier.read_text() == "earlier table\n"
        assert signal.getsignal(signal.SIGTERM) is recorder
    finally:
        signal.signal(signal.SIGTERM, previous)


def test_no_handler_outside_the_main_thread_or_over_a_foreign_one(monkeypatch):
    results = []
    thread = threading.Thread(target=lambda: results.append(termination_cleanup().__enter__()))
    thread.start()
    thread.join()
    assert results == [False]
    monkeypatch.setattr(interruption.signal, "getsignal", lambda signum: None)  # a handler installed outside Python
    with termination_cleanup() as installed:
        assert not installed


SCRIPT = textwrap.dedent("""
    import sys, time
    from fieldcast.algorithms import OutputSet, termination_cleanup
    from fieldcast.algorithms.io.atomic import write_text_atomically
    folder = sys.argv[1]
    with termination_cleanup(), OutputSet():
        write_text_atomically(folder + "/zinc.json", "{}", "the model file")
        print("staged", flush=True)
        time.sleep(60)
""")


def test_a_terminated_process_leaves_no_part_file_and_ends_by_the_signal(tmp_path):
    """The default SIGTERM handler is the one chained to: the process still ends by the signal."""
    link = tmp_path / "import" / "fieldcast"
    link.parent.mkdir()
    link.symlink_to(REPO_ROOT, target_is_directory=True)
    out = tmp_path / "out"
    out.mkdir()
    child = subprocess.Popen([sys.executable, "-c", SCRIPT, str(out)], stdout=subprocess.PIPE, text=True,
                             env=dict(os.environ, PYTHONPATH=str(link.parent)))
    assert child.stdout.readline() == "staged\n"
    assert len(names(out)) == 1
    child.send_signal(signal.SIGTERM)
    assert child.wait(timeout=60) == -signal.SIGTERM
    assert names(out) == []


@pytest.mark.skipif(os.name == "nt", reason="probing process ids is POSIX only")
def test_process_alive():
    assert interruption.process_alive(os.getpid()) and not interruption.process_alive(dead_pid())
