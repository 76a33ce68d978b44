"""The logger (`rxlog run`): CPU and memory, measured on separate processes.

1. **IQ at real time.** The simulated receiver paced at 2.4 MS/s (cu8 like a dongle)
   through the default sweep plan over 16-24 MHz into 1024 channels every second, the
   archive, the online detector and the event store, for 5 minutes (``--seconds`` for
   a shorter run). Its CPU is sampled every real second (psutil: user + system of all
   threads) and printed; the figure is the mean after the first 20 s of start-up (the
   whole-run mean is printed too), against 20 % of one core; peak RSS against 300 MB.
   The simulated receiver's own sample synthesis runs in the same process and counts.
2. **Spectral feed, 24 hours as fast as possible.** The spectral-domain simulator
   straight into archive, detector and store (``sim_feed = "spectra"``,
   ``sim_realtime = false``), 1024 channels at 1 s. RSS is sampled every half second;
   "start" is its median over the second tenth of the run (after imports, the sky model
   and the first archive hours), "end" its median over the last tenth (medians, so the
   hourly archive consolidation and the six-hourly sky planning, which come and go, do
   not decide the figure); growth must stay within 10 %. The peak is printed too.

    python -m benchmarks service
    python -m benchmarks.bench_service --seconds 60 --hours 6
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import textwrap
import time
from pathlib import Path

import psutil

IQ_SECONDS = 300.0
SPECTRA_HOURS = 24.0
WARMUP_S = 20.0
TARGET_CPU = 20.0           # percent of one core
TARGET_RSS_MB = 300.0
TARGET_GROWTH = 0.10

CONFIG = """
[station]
name = "bench"
latitude_deg = 47.5
longitude_deg = 8.7
timezone = "UTC"
[storage]
root = "{root}"
[service]
sim_feed = "{feed}"
sim_realtime = {realtime}
log_level = "warning"
"""

SPECTRA_RUN = textwrap.dedent("""
    import sys
    from rxlog.station.config import load_config
    from rxlog.station import journal, supervise
    journal.setup_logging("warning")
    summary = supervise.run(load_config(sys.argv[1]), sim_hours=float(sys.argv[2]))
    print(summary["spectra_archived"], summary["events"])
""")


def _config(folder: Path, feed: str, realtime: bool) -> Path:
    p = folder / f"{feed}.toml"
    p.write_text(CONFIG.format(root=folder / f"store-{feed}", feed=feed, realtime=str(realtime).lower()))
    return p


def _watch(proc: subprocess.Popen, every: float, report=None):
    """Sample (seconds since start, CPU seconds so far, RSS MB) until the process exits;
    return the samples and the process's peak RSS in MB (its high-water mark, from wait4)."""
    ps = psutil.Process(proc.pid)
    t0 = time.monotonic()
    samples = []
    while True:
        pid, status, usage = os.wait4(proc.pid, os.WNOHANG)
        if pid:
            proc.returncode = os.waitstatus_to_exitcode(status)
            # ru_maxrss is in kilobytes on Linux (getrusage(2))
            return samples, usage.ru_maxrss / 1e3
        try:
            c = ps.cpu_times()
            cpu = c.user + c.system          # all threads of the process
            rss = ps.memory_info().rss / 1e6
        except psutil.NoSuchProcess:
            continue
        samples.append((time.monotonic() - t0, cpu, rss))
        if report:
            report(samples)
        time.sleep(every)


def iq_realtime(seconds: float = IQ_SECONDS) -> list[tuple]:
    with tempfile.TemporaryDirectory(prefix="rxlog-bench-service-") as tmp:
        cfg = _config(Path(tmp), "iq", True)
        proc = subprocess.Popen([sys.executable, "-m", "rxlog", "run", "--config", str(cfg),
                                 "--duration", str(seconds)], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
                                text=True)

        def report(s):
            if len(s) >= 2:
                (ta, ca, _), (tb, cb, rss) = s[-2], s[-1]
                print(f"  iq t={tb:6.1f} s  cpu {100 * (cb - ca) / (tb - ta):5.1f} % of a core  rss {rss:6.1f} MB",
                      file=sys.stderr, flush=True)

        samples, peak = _watch(proc, 1.0, report)
        err = proc.stderr.read()
        if proc.returncode != 0:
            raise RuntimeError(f"rxlog run failed:\n{err}")
    steady = [s for s in samples if s[0] >= WARMUP_S]
    if len(steady) < 2:
        steady = samples
    mean_steady = 100 * (steady[-1][1] - steady[0][1]) / (steady[-1][0] - steady[0][0])
    mean_all = 100 * samples[-1][1] / samples[-1][0]
    steady_rss = max(s[2] for s in steady)
    return [
        ("iq 2.4 MS/s sweep, real time: duration", round(samples[-1][0], 1), "s", f"{seconds:g}", True),
        ("iq real time: CPU after start-up (mean)", round(mean_steady, 1), "% of one core", f"<= {TARGET_CPU:g}",
         mean_steady <= TARGET_CPU),
        ("iq real time: CPU whole run incl. start-up", round(mean_all, 1), "% of one core", "(info)", True),
        ("iq real time: peak RSS (high-water mark)", round(peak, 1), "MB", f"<= {TARGET_RSS_MB:g}",
         peak <= TARGET_RSS_MB),
        ("iq real time: RSS after start-up (max)", round(steady_rss, 1), "MB", "(info)", True),
    ]


def spectra_fast(hours: float = SPECTRA_HOURS) -> list[tuple]:
    with tempfile.TemporaryDirectory(prefix="rxlog-bench-service-") as tmp:
        cfg = _config(Path(tmp), "spectra", False)
        proc = subprocess.Popen([sys.executable, "-c", SPECTRA_RUN, str(cfg), str(hours)],
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        samples, peak = _watch(proc, 0.5)
        out, err = proc.stdout.read(), proc.stderr.read()
        if proc.returncode != 0:
            raise RuntimeError(f"rxlog spectral run failed:\n{err}")
    wall = samples[-1][0]

    def median_rss(a, b):
        return statistics.median(s[2] for s in samples if a * wall <= s[0] <= b * wall)

    start, end = median_rss(0.1, 0.2), median_rss(0.9, 1.0)
    growth = end / start - 1.0
    print(f"  spectra {hours:g} h in {wall:.1f} s: rss {start:.1f} MB (10-20 %) -> {end:.1f} MB (last 10 %) "
          f"(peak {peak:.1f} MB); archived/events: {out.strip()}", file=sys.stderr)
    return [
        (f"spectra {hours:g} h as fast as possible: wall time", round(wall, 1), "s", "(info)", True),
        ("spectra fast: real-time factor", round(hours * 3600 / wall, 0), "x", "(info)", True),
        ("spectra fast: RSS at start (median, 10-20 % of the run)", round(start, 1), "MB", "(info)", True),
        ("spectra fast: RSS at the end (median, last 10 %)", round(end, 1), "MB", "(info)", True),
        ("spectra fast: peak RSS (high-water mark)", round(peak, 1), "MB", "(info)", True),
        ("spectra fast: RSS growth", round(100 * growth, 1), "%", f"<= {100 * TARGET_GROWTH:g}",
         growth <= TARGET_GROWTH),
    ]


def run(seconds: float = IQ_SECONDS, hours: float = SPECTRA_HOURS) -> list[tuple]:
    return iq_realtime(seconds) + spectra_fast(hours)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--seconds", type=float, default=IQ_SECONDS, help="length of the real-time IQ run")
    ap.add_argument("--hours", type=float, default=SPECTRA_HOURS, help="simulated hours of the fast spectral run")
    a = ap.parse_args(argv)
    for name, value, unit, target, ok in run(a.seconds, a.hours):
        print(f"{name:48s} {value!s:>10} {unit:14s} {target:>8s}  {'ok' if ok else 'MISSED'}")


if __name__ == "__main__":
    main()
