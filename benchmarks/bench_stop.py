"""Time to stop after a signal: SIGINT / SIGTERM sent while the long kernels run.

Runs ``tsunamifocus run`` on the invented demo scenario with many rays (and, with ``--wave``,
``tsunamifocus check`` with a long simulated duration) in a child process, waits until the kernel
has been running for ``--after`` seconds, sends the signal and measures the wall time until the
process has exited. Prints, side by side: kernel, signal, rays, exit code (expected 130 / 143),
seconds until the one-line message and until the process has exited, and whether anything was left behind (the output folder or a hidden temporary
sibling).

Run: ``python benchmarks/bench_stop.py [--rays 200000 2000000] [--wave]``
"""

from __future__ import annotations

import argparse
import os
import shutil
import signal
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path


def _child(args: list[str]) -> tuple[subprocess.Popen, list[str]]:
    env = dict(os.environ, PYTHONUNBUFFERED="1", MPLBACKEND="Agg")
    # SIGINT as a user's terminal delivers it, even when this script runs in the background (where it
    # is inherited ignored: POSIX keeps ignored signals across exec)
    p = subprocess.Popen([sys.executable, "-m", "tsunamifocus.cli", *args], stdout=subprocess.DEVNULL,
                         stderr=subprocess.PIPE, text=True, env=env,
                         preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    lines: list[str] = []
    threading.Thread(target=lambda: [lines.append(ln) for ln in p.stderr], daemon=True).start()
    return p, lines


def _stop(args: list[str], marker: str, sig: int, after: float, out: Path) -> tuple[int, float, float, str]:
    p, lines = _child(args)
    t0 = time.monotonic()
    while not any(marker in ln for ln in lines):
        if p.poll() is not None or time.monotonic() - t0 > 600:
            raise SystemExit("the kernel never started:\n" + "".join(lines[-10:]))
        time.sleep(0.02)
    time.sleep(after)
    ts = time.monotonic()
    n0 = len(lines)
    p.send_signal(sig)
    t_msg = float("inf")
    while p.poll() is None and time.monotonic() - ts < 120:
        if t_msg == float("inf") and any(ln.startswith("error:") for ln in lines[n0:]):
            t_msg = time.monotonic() - ts
        time.sleep(0.005)
    if p.poll() is None:
        p.kill()
        return -9, float("inf"), float("inf"), "killed after 120 s"
    rc = p.wait()
    dt = time.monotonic() - ts
    if t_msg == float("inf") and any(ln.startswith("error:") for ln in lines[n0:]):
        t_msg = dt
    left = [q.name for q in out.parent.iterdir() if q.name == out.name or q.name.startswith(f".{out.name}.")]
    return rc, t_msg, dt, ", ".join(left) or "nothing"


def main() -> None:
    from tsunamifocus.products.demo import demo_inputs

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rays", type=int, nargs="+", default=[20_000, 200_000, 2_000_000])
    ap.add_argument("--after", type=float, default=3.0, help="seconds of kernel time before the signal")
    ap.add_argument("--wave", action="store_true", help="also signal the wave solver of 'check'")
    a = ap.parse_args()
    tmp = Path(tempfile.mkdtemp())
    try:
        sc = demo_inputs(tmp / "inputs")
        print(f"{'kernel':8s} {'signal':8s} {'rays':>10s} {'exit':>5s} {'message s':>9s} {'exited s':>8s}  left behind")
        for n in a.rays:
            for sig in (signal.SIGINT, signal.SIGTERM):
                out = tmp / f"out_{n}_{sig}"
                rc, tm, dt, left = _stop(["run", str(sc), "--rays", str(n), "--out", str(out)], "] tracing", sig,
                                         a.after, out)
                print(f"{'rays':8s} {signal.Signals(sig).name:8s} {n:10d} {rc:5d} {tm:9.2f} {dt:8.2f}  {left}")
        if a.wave:
            run = tmp / "run"
            subprocess.run([sys.executable, "-m", "tsunamifocus.cli", "-q", "run", str(sc), "--rays", "2000",
                            "--out", str(run)], check=True)
            for sig in (signal.SIGINT, signal.SIGTERM):
                out = tmp / f"chk_{sig}"
                rc, tm, dt, left = _stop(["check", str(run), "--out", str(out), "--hours", "20"],
                                         "linear long-wave check", sig, a.after, out)
                print(f"{'wave':8s} {signal.Signals(sig).name:8s} {'-':>10s} {rc:5d} {tm:9.2f} {dt:8.2f}  {left}")
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
