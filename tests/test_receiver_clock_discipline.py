"""Clock discipline invariants: over a simulated day with a crystal 40 ppm fast, dropped
buffers, read latency jitter and (for rtl_tcp) network stalls, every block's time stays
within 50 ms of the host's UTC, every drop is reported as a gap of the right size, and
stalls that lose nothing are not mistaken for drops.

The simulation is our own model of the hardware (a free-running sample clock, reads that
return when their last sample has arrived plus a latency), driven through injectable
clocks: CLOCK_MONOTONIC running 5 ppm off true time, CLOCK_REALTIME wandering by NTP's
+-1 ms. "Host UTC" is CLOCK_REALTIME at the moment a sample was taken.
"""

import numpy as np
import pytest

from rxlog.receive.clock import ClockDiscipline
from rxlog.receive.devices import RtlSdrSource
from rxlog.receive.rtltcp import RtlTcpSource

RATE = 2_400_000
CRYSTAL_PPM = 40.0             # the dongle's crystal runs fast (domain: 1-50 ppm)
HOST_PPM = 5.0                 # CLOCK_MONOTONIC rate error against true time
EPOCH = 1_796_000_000.0        # true UTC (POSIX s) at simulation time 0


def simulate(seconds, *, read, lookahead, p_drop, stalls, seed):
    READ = read
    rng = np.random.default_rng(seed)
    r_true = RATE * (1 + CRYSTAL_PPM * 1e-6)
    n_reads = int(seconds * RATE / READ)
    # drops of 10 ms to 0.5 s of samples
    gaps = np.where(rng.random(n_reads) < p_drop, rng.integers(RATE // 100, RATE // 2, n_reads), 0)
    gaps[0] = 0
    starts = np.cumsum(gaps + READ) - READ            # true index of each read's first sample
    produced = starts / r_true                        # true time of each read's first sample
    ret = (starts + READ) / r_true + 0.0004 + rng.exponential(0.0008, n_reads)
    stalled = np.zeros(n_reads, bool)
    if stalls:
        # network stalls: reads due within a stall come out right after it (nothing lost)
        for t_s in rng.uniform(0, seconds, stalls):
            d = rng.uniform(0.05, 0.3)
            hit = (ret >= t_s) & (ret < t_s + d)
            ret[hit] = t_s + d + 0.0001 * np.arange(hit.sum())
            stalled |= hit
        ret = np.maximum.accumulate(ret)
    now = [0.0]
    clock = ClockDiscipline(RATE, monotonic=lambda: 1000.0 + now[0] * (1 + HOST_PPM * 1e-6),
                            realtime=lambda: EPOCH + now[0] + ntp_wander(now[0]), lookahead=lookahead)
    t0 = np.empty(n_reads)
    dropped = np.empty(n_reads, dtype=np.int64)
    out = 0
    for i in range(n_reads):
        now[0] = ret[i]
        clock.push(READ, i)
        for item, t, d in clock.pop_ready(flush=(i == n_reads - 1)):
            t0[item], dropped[item] = t, d
            out += 1
    assert out == n_reads
    return t0, EPOCH + produced + ntp_wander(produced), dropped, gaps, stalled


def ntp_wander(t):
    """CLOCK_REALTIME's error under NTP: a slow wander of +-1 ms (common practice for a LAN/GPS-fed chrony)."""
    return 0.001 * np.sin(2 * np.pi * t / 3600.0)


# (read size, look-ahead, stalls, seconds, drop probability per read): a day of large USB
# reads, half an hour of rtl_tcp reads of realistic size with network stalls of 50-300 ms
CASES = {"usb-sync-day": (1 << 20, RtlSdrSource.lookahead, 0, 86400.0, 2e-3),
         "rtltcp-with-stalls": (1 << 16, RtlTcpSource.lookahead, 60, 1800.0, 4e-4)}


@pytest.mark.parametrize("case", CASES)
def test_times_stay_within_50_ms_of_host_utc_with_fast_crystal_and_drops(case):
    read, lookahead, stalls, seconds, p_drop = CASES[case]
    t0, truth, dropped, gaps, _ = simulate(seconds, read=read, lookahead=lookahead, p_drop=p_drop,
                                           stalls=stalls, seed=4)
    err = t0 - truth
    assert np.abs(err).max() < 0.050, f"worst time error {np.abs(err).max() * 1e3:.1f} ms"
    # every drop is reported where it happened, its size to within the latency jitter
    # the discipline tolerates (a few ms of samples)
    assert (gaps > 0).sum() > 20
    np.testing.assert_array_equal(dropped > 0, gaps > 0)
    tol = ClockDiscipline(RATE).tolerance_s
    assert np.abs(dropped - gaps)[gaps > 0].max() < tol * RATE


def test_stalls_without_loss_are_not_gaps():
    t0, truth, dropped, gaps, stalled = simulate(900.0, read=1 << 16, lookahead=RtlTcpSource.lookahead,
                                                 p_drop=0.0, stalls=50, seed=7)
    assert stalled.sum() > 50
    assert dropped.sum() == 0
    assert np.abs(t0 - truth).max() < 0.010


def test_block_times_are_continuous_between_drops():
    """Times advance by n / rate (within the 1000 ppm slew limit) unless samples were lost."""
    read = 1 << 18
    t0, truth, dropped, gaps, _ = simulate(1800.0, read=read, lookahead=RtlSdrSource.lookahead, p_drop=5e-3,
                                           stalls=0, seed=11)
    step = np.diff(t0) - read / RATE - dropped[1:] / RATE
    assert np.abs(step).max() <= 1.001e-3 * read / RATE + 1e-6
