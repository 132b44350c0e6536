"""Stopping a run from outside (issue 14, items 8 and 9): nothing left behind, no worker left.

A real command-line process runs on the small invented region (``messy_region``) and is held
at a chosen stage: computing the gauges (in two worker processes) or writing the GeoPackage.
The hold is a patch that makes the stage wait, so the signal always lands mid-run, whatever
the machine's speed (no timing in these tests). Then:

* SIGTERM cleans up as Ctrl-C does: exit 143, no hidden file beside the output, no folder in
  the temporary folder, no worker alive;
* SIGKILL cannot be cleaned up by the process itself: its workers die with it (the kernel's
  parent-death signal, or their own watch on the parent), and the next run removes what it
  left, and only that: look-alike names, a live process's files and another machine's are
  left alone.

Linux only (the process table is read from /proc).
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from messy_region import write_region
from test_end_to_end import run_args

from recharge_atlas.algorithms import files

pytestmark = pytest.mark.skipif(
    not sys.platform.startswith("linux"), reason="reads the process table in /proc"
)

#: A wrapper around the command line that holds one stage of the run until it is signalled.
#: Every held process (the main one, or each worker) writes its process id into ``ready``.
HOLDER = """
import os, sys, time
from pathlib import Path
from recharge_atlas import cli
from recharge_atlas.algorithms import geopackage, groups

ready, stage, args = Path(sys.argv[1]), sys.argv[2], sys.argv[3:]

def hold(*a, **k):
    (ready / str(os.getpid())).write_text("held")
    time.sleep(900)

if stage == "compute":
    groups._gauge_hydrology = hold
elif stage == "write":
    geopackage.add_attribute_table = hold
raise SystemExit(cli.main(args))
"""

#: Longest wait for a process to reach its hold or to end (a bound, not a timing target).
PATIENCE = 120.0


@pytest.fixture(scope="module")
def region(tmp_path_factory):
    return write_region(tmp_path_factory.mktemp("region"))


@pytest.fixture
def start(tmp_path, region):
    """Starts a held run; whatever a failed test leaves running is killed at the end."""
    runs = []

    def started(stage, *extra):
        runs.append(Held(tmp_path, region, stage, *extra))
        return runs[-1]

    yield started
    for run in runs:
        if run.process.poll() is None:
            run.process.kill()
            run.process.communicate()
        for pid in [int(p.name) for p in run.ready.iterdir()]:
            if alive(pid):
                os.kill(pid, signal.SIGKILL)


class Held:
    """The command line started with a stage held, its own temporary folder and its output
    folder."""

    def __init__(self, tmp_path, region, stage, *extra):
        self.tmp = tmp_path / "tmp"
        self.ready = tmp_path / "ready"
        self.outdir = tmp_path / "out"
        for folder in (self.tmp, self.ready, self.outdir):
            folder.mkdir(exist_ok=True)
        self.out = self.outdir / "recharge.gpkg"
        self.region = region
        self.env = {**os.environ, "TMPDIR": str(self.tmp)}
        script = tmp_path / "holder.py"
        script.write_text(HOLDER)
        self.process = subprocess.Popen(
            [sys.executable, str(script), str(self.ready), stage, *run_args(region, self.out)]
            + list(extra),
            env=self.env,
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
        )

    def held(self, count=1):
        """The process ids held, once ``count`` of them are."""
        deadline = time.monotonic() + PATIENCE
        while time.monotonic() < deadline:
            pids = [int(p.name) for p in self.ready.iterdir()]
            if len(pids) >= count:
                return pids
            if self.process.poll() is not None:
                pytest.fail(f"the run ended before its hold: {self.process.communicate()}")
            time.sleep(0.05)
        self.process.kill()
        pytest.fail("the run never reached its hold")

    def stop(self, signum):
        self.process.send_signal(signum)
        out, err = self.process.communicate(timeout=PATIENCE)
        return self.process.returncode, err

    def leftovers(self):
        """Everything in the output folder and the temporary folder, with sizes."""
        found = {}
        for folder in (self.outdir, self.tmp):
            for path in sorted(folder.rglob("*")):
                if path.is_file():
                    found[str(path.relative_to(folder.parent))] = path.stat().st_size
                elif path.is_dir():
                    found.setdefault(str(path.relative_to(folder.parent)), 0)
        return found

    def run_again(self):
        return subprocess.run(
            [sys.executable, "-m", "recharge_atlas", *run_args(self.region, self.out)],
            env=self.env,
            capture_output=True,
            text=True,
            timeout=600,
        )


def alive(pid):
    """Whether a process exists and is not a zombie waiting to be reaped."""
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii", errors="replace") as handle:
            state = handle.read().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state not in ("Z", "X")


def gone(pids):
    """True once none of ``pids`` is alive (waiting at most PATIENCE)."""
    deadline = time.monotonic() + PATIENCE
    while time.monotonic() < deadline:
        if not any(alive(p) for p in pids):
            return True
        time.sleep(0.05)
    return False


def test_sigterm_while_computing_in_workers_cleans_up_like_ctrl_c(start):
    run = start("compute", "--workers", "2", "--gauges-per-group", "2")
    workers = run.held(2)
    assert os.getpid() not in workers and run.process.pid not in workers
    assert any("recharge-atlas-tables-" in name for name in run.leftovers())  # the spill exists
    code, err = run.stop(signal.SIGTERM)
    assert code == 128 + signal.SIGTERM, err
    assert err.strip().splitlines()[-1] == "recharge-atlas: stopped (SIGTERM); no output written"
    assert "Traceback" not in err
    assert run.leftovers() == {}
    assert gone(workers), "a worker outlived the stopped run"


def test_sigterm_while_writing_cleans_up_like_ctrl_c(start):
    run = start("write", "--gauges-per-group", "1")
    run.held(1)
    names = list(run.leftovers())
    assert any(Path(n).name.startswith(".") for n in names), names  # the hidden GeoPackage
    code, err = run.stop(signal.SIGTERM)
    assert code == 128 + signal.SIGTERM, err
    assert "Traceback" not in err
    assert run.leftovers() == {}


def test_an_earlier_result_survives_a_sigterm(tmp_path, region, start):
    (tmp_path / "out").mkdir()
    earlier = tmp_path / "out" / "recharge.gpkg"
    earlier.write_bytes(Path(region["gauges"]).read_bytes())  # any GeoPackage will do
    run = start("write")
    run.held(1)
    code, _err = run.stop(signal.SIGTERM)
    assert code == 128 + signal.SIGTERM
    assert earlier.read_bytes() == Path(region["gauges"]).read_bytes()
    assert list(run.leftovers()) == ["out/recharge.gpkg"]


@pytest.mark.parametrize("stage", ["compute", "write"])
def test_after_sigkill_workers_die_and_the_next_run_removes_the_leftovers(tmp_path, start, stage):
    run = start(stage, "--workers", "2", "--gauges-per-group", "2")
    held = run.held(2 if stage == "compute" else 1)
    code, _err = run.stop(signal.SIGKILL)
    assert code == -signal.SIGKILL
    assert gone(held), "a held process outlived its killed parent"
    left = run.leftovers()
    assert any(str(run.process.pid) in name for name in left), left  # SIGKILL left them
    # Look-alikes the next run must not touch: a live process's, another machine's (or boot's),
    # a name that merely resembles ours, and a folder holding a file we never make.
    live = files.owner_tag()  # this test process: alive
    dead_pid = run.process.pid
    other = f"~ra-ffffffff-{dead_pid}-" if live[4:12] != "ffffffff" else f"~ra-eeeeeeee-{dead_pid}-"
    keep = [
        run.outdir / f".recharge.{live}abcd1234.gpkg",
        run.outdir / f".recharge.{other}abcd1234.gpkg",
        run.outdir / f".recharge.~ra-{dead_pid}-abcd1234.gpkg",
        run.outdir / "notes.txt",
    ]
    for path in keep:
        path.write_text("not the run's")
    foreign = run.tmp / f"recharge-atlas-tables-~ra-{live[4:12]}-{dead_pid}-zzzz9999"
    foreign.mkdir()
    (foreign / "tables.sqlite").write_text("x")
    (foreign / "mine.txt").write_text("someone's own file")
    done = run.run_again()
    assert done.returncode == 0, done.stderr
    assert "left by an earlier run that was killed" in done.stderr
    kept = [*keep, foreign, foreign / "mine.txt", foreign / "tables.sqlite", run.out]
    assert set(run.leftovers()) == {str(p.relative_to(tmp_path)) for p in kept}
