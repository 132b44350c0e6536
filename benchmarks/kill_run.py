"""Kill a large run outright, run again, and show what was left and what survived.

Usage::

    python benchmarks/kill_run.py [--gauges 300] [--years 30] [--workers 2]
                                  [--gauges-per-group 100] [--folder DIR] [--signal KILL|TERM]

It writes a synthetic network (``sample_layers.generate.make_network``, invented gauges) as a
Parquet discharge table, then runs the command line twice and kills it with SIGKILL, the way
the out-of-memory killer ends a process:

1. while the gauges are computed in ``--workers`` processes (the result tables of finished
   groups are on disk in the temporary folder);
2. while the GeoPackage is written (a hidden file beside the output, and its journal).

After each kill it prints the files left (output folder and temporary folder, with sizes) and
how many of the run's worker processes are still alive a few seconds later. Then it runs the
same command to the end and prints what that run removed, what is left besides the output,
and whether any process of the killed runs is still alive. Surviving workers are killed at the
end so the machine is left clean. ``--signal TERM`` sends SIGTERM instead, to see the run's
own clean-up. Prints figures; asserts nothing (``tests/test_stopping.py``
checks the same on a small region).

The runs use their own temporary folder (``TMPDIR`` under the work folder) so that other
programs' files never count. Run it with ``PYTHONPATH`` pointing at the code to measure.
"""

from __future__ import annotations

import argparse
import os
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

#: Longest wait for a stage to be reached or a process to end (seconds).
PATIENCE = 1800.0


def write_network(folder, gauges, years, seed=1):
    """Layers and a Parquet discharge table of a synthetic network (invented ids)."""
    from recharge_atlas.sample_layers.generate import make_network

    network = make_network(gauges, years, seed=seed)
    network.gauges.to_file(folder / "gauges.gpkg", driver="GPKG")
    network.catchments.to_file(folder / "catchments.gpkg", driver="GPKG")
    network.discharge_table().to_parquet(folder / "discharge.parquet", index=False)
    return {
        "gauges": folder / "gauges.gpkg",
        "catchments": folder / "catchments.gpkg",
        "discharge": folder / "discharge.parquet",
    }


def children(pid):
    """Process ids whose parent is ``pid`` (from /proc)."""
    found = []
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            with open(f"/proc/{entry}/stat", encoding="ascii", errors="replace") as handle:
                fields = handle.read().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if int(fields[1]) == pid:
            found.append(int(entry))
    return found


def alive(pid):
    """Whether a process exists and is not a zombie."""
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii", errors="replace") as handle:
            return handle.read().rsplit(")", 1)[1].split()[0] not in ("Z", "X")
    except OSError:
        return False


def rss_mb(pid):
    try:
        with open(f"/proc/{pid}/status", encoding="ascii") as handle:
            for line in handle:
                if line.startswith("VmRSS:"):
                    return int(line.split()[1]) / 1024
    except OSError:
        pass
    return 0.0


def leftovers(folders):
    """Every file under ``folders`` with its size in bytes, and the folders themselves."""
    found = {}
    for folder in folders:
        for path in sorted(Path(folder).rglob("*")):
            try:
                found[str(path)] = path.stat().st_size if path.is_file() else 0
            except OSError:
                pass
    return found


def show(title, found):
    total = sum(found.values())
    print(f"{title}: {len(found)} entries, {total / 1e6:,.1f} MB")
    for path, size in found.items():
        print(f"  {size / 1e6:10,.1f} MB  {path}")


def command(paths, out, workers, per_group):
    return [
        sys.executable, "-m", "recharge_atlas", "run",
        "--gauges", str(paths["gauges"]), "--catchments", str(paths["catchments"]),
        "--discharge", str(paths["discharge"]), "--out", str(out),
        "--workers", str(workers), "--gauges-per-group", str(per_group),
    ]  # fmt: skip


def kill_at(stage, argv, env, outdir, temp, signum=signal.SIGKILL):
    """Start a run, send it ``signum`` at ``stage``; returns the process and the ids of the
    processes it had started."""
    process = subprocess.Popen(argv, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    started = time.monotonic()
    workers = set()
    while time.monotonic() - started < PATIENCE:
        if process.poll() is not None:
            print(f"the run ended (exit {process.returncode}) before stage {stage!r}")
            return process, workers
        running = children(process.pid)
        workers.update(running)
        hidden = [p for p in outdir.iterdir() if p.name.startswith(".") and p.is_file()]
        tables = [p for p in temp.iterdir() if p.name.startswith("recharge-atlas-tables-")]
        held = [p for p in tables if (p / "tables.sqlite").exists()]
        if stage == "compute" and held and len(running) >= 2:  # a later group, workers busy
            time.sleep(0.5)
            workers.update(children(process.pid))
            break
        if stage == "write" and hidden and sum(p.stat().st_size for p in hidden) > 20e6:
            break
        time.sleep(0.05)
    memory = {pid: rss_mb(pid) for pid in workers if alive(pid)}
    process.send_signal(signum)
    process.wait()
    print(
        f"\n{signal.Signals(signum).name} at {stage!r} (exit {process.returncode}) after {time.monotonic() - started:.1f} s; its workers: "
        + (", ".join(f"{pid} ({mb:.0f} MB)" for pid, mb in memory.items()) or "none running")
    )
    return process, workers


def survivors(pids, wait=5.0):
    """The processes of ``pids`` still alive after ``wait`` seconds."""
    time.sleep(wait)
    return [pid for pid in pids if alive(pid)]


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--gauges", type=int, default=300)
    parser.add_argument("--years", type=int, default=30)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--gauges-per-group", type=int, default=100)
    parser.add_argument("--folder", help="work folder (default: a new temporary one, removed)")
    parser.add_argument(
        "--signal",
        default="KILL",
        choices=["KILL", "TERM"],
        help="how the runs are stopped (default KILL; TERM shows the run's own clean-up)",
    )
    args = parser.parse_args(argv)
    if not sys.platform.startswith("linux"):
        print("reads the process table in /proc: Linux only")
        return 0
    if args.folder:
        return run(Path(args.folder), args)
    with tempfile.TemporaryDirectory(prefix="recharge-atlas-kill-") as folder:
        return run(Path(folder), args)


def run(folder, args):
    inputs, outdir, temp = folder / "inputs", folder / "out", folder / "tmp"
    for path in (inputs, outdir, temp):
        path.mkdir(parents=True, exist_ok=True)
    started = time.monotonic()
    paths = write_network(inputs, args.gauges, args.years)
    print(
        f"network: {args.gauges} gauges x {args.years} years, "
        f"{paths['discharge'].stat().st_size / 1e6:,.0f} MB Parquet, "
        f"made in {time.monotonic() - started:.0f} s"
    )
    env = {**os.environ, "TMPDIR": str(temp)}
    argv = command(paths, outdir / "recharge.gpkg", args.workers, args.gauges_per_group)
    every = set()
    for stage in ("compute", "write"):
        signum = getattr(signal, f"SIG{args.signal}")
        process, workers = kill_at(stage, argv, env, outdir, temp, signum)
        every.update(workers)
        alive_after = survivors(workers)
        print(
            f"workers alive 5 s after the signal: {len(alive_after)} of {len(workers)}"
            + (
                f" ({', '.join(f'{p}: {rss_mb(p):.0f} MB' for p in alive_after)})"
                if alive_after
                else ""
            )
        )
        show("left behind", leftovers([outdir, temp]))
    print("\nrunning again to the end ...")
    started = time.monotonic()
    done = subprocess.run(argv, env=env, capture_output=True, text=True)
    removed = [line for line in done.stderr.splitlines() if "left by an earlier run" in line]
    print(f"exit {done.returncode} after {time.monotonic() - started:.0f} s")
    print("it said: " + (removed[0] if removed else "(nothing about leftovers)"))
    if done.returncode != 0:
        print(done.stderr[-2000:])
    after = leftovers([outdir, temp])
    after.pop(str(outdir / "recharge.gpkg"), None)
    show("left besides the output", after)
    still = [pid for pid in every if alive(pid)]
    print(f"processes of the killed runs alive now: {len(still)}")
    for pid in still:  # leave the machine clean
        try:
            os.kill(pid, signal.SIGKILL)
        except OSError:
            pass
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
