"""Run any callable in a forked child of this (preloaded) process, within time and memory limits.

The parent polls the child's pipe, the clock and the child's resident memory, kills it past a
limit, and turns every ending into an `Outcome`: the callable's (pickled) result, or a status
(``timeout``, ``out_of_memory``, ``crashed``) with a reason. A child dies with its parent
(PR_SET_PDEATHSIG), and an interrupted parent kills its child before re-raising, so no orphan
keeps running. Used by lapbench.run for cases and by lapbench.plugins for conformance checks.
"""
from __future__ import annotations

import dataclasses
import faulthandler
import os
import pickle
import select
import signal
import sys
import tempfile
import time
from pathlib import Path
from typing import Callable

__all__ = ["Outcome", "run_isolated", "rss_mb", "cpu_times", "POLL_INTERVAL"]

POLL_INTERVAL = 0.02      # seconds between the parent's memory checks


@dataclasses.dataclass
class Outcome:
    """How an isolated call ended: `result` when it returned, else `status` and `reason`."""

    result: object = None
    status: str | None = None
    reason: str = ""
    wall: float = 0.0
    peak_rss_mb: float = 0.0


def cpu_times() -> tuple[float, float]:
    """(system-wide busy CPU seconds, this process tree's CPU seconds)."""
    busy = 0.0
    try:
        with open("/proc/stat") as fh:
            parts = fh.readline().split()[1:]
        vals = [float(v) for v in parts]
        tick = os.sysconf("SC_CLK_TCK")
        busy = (sum(vals[:3]) + sum(vals[5:8])) / tick  # user nice system irq softirq steal
    except (OSError, ValueError, IndexError):
        pass
    t = os.times()
    return busy, t.user + t.system + t.children_user + t.children_system


def _set_pdeathsig():
    """Let the child die with the harness (a killed driver leaves no orphaned case running)."""
    try:
        import ctypes

        libc = ctypes.CDLL("libc.so.6", use_errno=True)
        libc.prctl(1, signal.SIGKILL)  # PR_SET_PDEATHSIG
    except OSError:
        pass


def rss_mb(pid: int) -> tuple[float, float]:
    """(VmRSS, VmHWM) of a process in MiB, from /proc."""
    rss = hwm = 0.0
    try:
        with open(f"/proc/{pid}/status") as fh:
            for line in fh:
                if line.startswith("VmRSS:"):
                    rss = float(line.split()[1]) / 1024
                elif line.startswith("VmHWM:"):
                    hwm = float(line.split()[1]) / 1024
    except OSError:
        pass
    return rss, hwm


def _backstop(limit_mb: float) -> None:
    """Hard address-space limit well above the polled one: allocation fails instead of swapping."""
    try:
        import resource

        _, hard = resource.getrlimit(resource.RLIMIT_AS)
        with open("/proc/self/status") as fh:
            vms = next(float(line.split()[1]) * 1024 for line in fh if line.startswith("VmSize:"))
        cap = int(vms + 2 * limit_mb * 2 ** 20)
        if hard == resource.RLIM_INFINITY or cap < hard:
            resource.setrlimit(resource.RLIMIT_AS, (cap, hard))
    except (OSError, ValueError, StopIteration):
        pass


def run_isolated(fn: Callable[[], object], time_limit: float, memory_limit_mb: float | None = None,
                 limit_text: str | None = None) -> Outcome:
    """Call `fn()` in a forked child; its return value must pickle.

    `memory_limit_mb` limits what the child adds to the resident memory it started with (it
    shares this process's pages: numpy, scipy, torch when loaded are not its own memory).
    `limit_text` is how the time limit is named in a timeout's reason.
    """
    rfd, wfd = os.pipe()
    base_mb, _ = rss_mb(os.getpid())
    crash_log = tempfile.TemporaryFile()  # where a dying child's Python stack goes (faulthandler)
    sys.stdout.flush()
    sys.stderr.flush()
    pid = os.fork()
    if pid == 0:  # child
        code = 0
        try:
            os.close(rfd)
            _set_pdeathsig()
            faulthandler.enable(file=crash_log, all_threads=False)
            if memory_limit_mb is not None:
                _backstop(memory_limit_mb)
            data = pickle.dumps(fn(), protocol=pickle.HIGHEST_PROTOCOL)
            view = memoryview(data)
            while view:
                view = view[os.write(wfd, view):]
        except BaseException:  # noqa: BLE001
            code = 70
        finally:
            os._exit(code)
    os.close(wfd)
    try:
        return _wait(pid, rfd, base_mb, crash_log, time_limit, memory_limit_mb,
                     limit_text or f"the time limit of {time_limit:g} s")
    finally:
        crash_log.close()


def _crash_site(crash_log) -> str:
    """`` at a.py:5 in f, b.py:9 in g``: the two innermost frames faulthandler wrote, or ''."""
    try:
        crash_log.seek(0)
        text = crash_log.read(65536).decode("utf-8", "replace")
    except OSError:
        return ""
    frames = []
    for line in text.splitlines():
        line = line.strip()
        if line.startswith('File "') and '", line ' in line and len(frames) < 2:
            fname, rest = line[6:].split('", line ', 1)
            lineno, _, func = rest.partition(" in ")
            frames.append(f"{Path(fname).name}:{lineno.strip()}" + (f" in {func.strip()}" if func else ""))
    return " at " + ", called from ".join(frames) if frames else ""


def _wait(pid: int, rfd: int, base_mb: float, crash_log, limit_s: float, limit_mb: float | None,
          limit_text: str) -> Outcome:
    """The parent's side: poll the pipe, the clock and the child's memory; the child's result."""
    t0 = time.perf_counter()
    chunks: list[bytes] = []
    status = None
    reason = ""
    peak_seen = 0.0
    exit_status = None
    try:
        while True:
            remaining = limit_s - (time.perf_counter() - t0)
            if remaining <= 0:
                status, reason = "timeout", f"exceeded {limit_text} (killed)"
                break
            ready, _, _ = select.select([rfd], [], [], min(POLL_INTERVAL, remaining))
            if ready:
                data = os.read(rfd, 1 << 20)
                if not data:
                    break  # child closed the pipe: finished or died
                chunks.append(data)
                continue
            rss, _ = rss_mb(pid)
            peak_seen = max(peak_seen, rss)
            if limit_mb is not None and rss - base_mb > limit_mb:
                status = "out_of_memory"
                reason = (f"resident memory grew by {rss - base_mb:.0f} MiB (to {rss:.0f} MiB), above "
                          f"budget.memory_limit_mb = {limit_mb:g} MiB (killed)")
                break
            done, st = os.waitpid(pid, os.WNOHANG)
            if done:
                exit_status = st
                while True:  # drain whatever is left in the pipe
                    data = os.read(rfd, 1 << 20)
                    if not data:
                        break
                    chunks.append(data)
                break
    except BaseException:
        # the parent itself is interrupted (Ctrl-C, SIGTERM turned exception): take the child down
        # with it instead of waiting for it, so that no orphan keeps running
        status = status or "interrupted"
        raise
    finally:
        if status in ("timeout", "out_of_memory", "interrupted"):
            try:
                os.kill(pid, signal.SIGKILL)
            except ProcessLookupError:
                pass
        if exit_status is None:
            try:
                _, exit_status = os.waitpid(pid, 0)
            except ChildProcessError:
                exit_status = 0
        os.close(rfd)
    wall = time.perf_counter() - t0
    if status is not None:
        return Outcome(status=status, reason=reason, wall=wall, peak_rss_mb=peak_seen)
    if chunks:
        try:
            return Outcome(result=pickle.loads(b"".join(chunks)), wall=wall, peak_rss_mb=peak_seen)
        except Exception:  # noqa: BLE001  (truncated pipe: the child died while writing)
            pass
    if os.WIFSIGNALED(exit_status):
        sig = os.WTERMSIG(exit_status)
        name = signal.Signals(sig).name if sig in signal.Signals._value2member_map_ else str(sig)
        if sig == signal.SIGKILL and limit_mb is not None and peak_seen - base_mb > 0.8 * limit_mb:
            return Outcome(status="out_of_memory", reason=f"killed by {name} near the memory limit", wall=wall,
                           peak_rss_mb=peak_seen)
        return Outcome(status="crashed", reason=f"case process killed by signal {name}{_crash_site(crash_log)}",
                       wall=wall, peak_rss_mb=peak_seen)
    code = os.WEXITSTATUS(exit_status) if os.WIFEXITED(exit_status) else -1
    return Outcome(status="crashed", reason=f"case process exited with code {code} without a result",
                   wall=wall, peak_rss_mb=peak_seen)
