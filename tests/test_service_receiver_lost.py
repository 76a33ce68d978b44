"""The receiver disappears (here: the rtl_tcp server at the antenna goes away) and comes
back: the logger retries with a doubling wait, records the gap, and resumes by itself —
the same process, no restart. The server is a loopback rtl_tcp speaker in the test."""

import signal
import time

from service_helpers import (
    NARROW_IQ,
    RtlTcpServer,
    Run,
    archive_rows,
    health_rows,
    integrity,
    write_config,
)

from rxlog.station.config import load_config
from rxlog.timeutil import parse_iso

OUTAGE_S = 2.0
RTL_SET_FREQ = 0x01


def test_rtl_tcp_server_gone_and_back(tmp_path):
    server = RtlTcpServer(rate=250_000).start()
    receiver = "\n".join(['kind = "rtltcp"', 'host = "127.0.0.1"', f"port = {server.port}",
                          "sample_rate_hz = 250000", 'direct_sampling = "q"', "reconnect_max_s = 1"])
    path = write_config(tmp_path, **dict(NARROW_IQ, receiver=receiver))
    cfg = load_config(path)
    run = Run(path)
    back = None
    try:
        run.wait_for("segment ", timeout=40)
        time.sleep(1.5)
        server.stop()
        run.wait_for("WARNING receiver lost at", timeout=20)
        time.sleep(OUTAGE_S)
        back = RtlTcpServer(rate=250_000, port=server.port).start()
        run.wait_for("data resumed", timeout=30)
        time.sleep(1.0)
        assert run.proc.poll() is None, "the logger exited instead of waiting for its receiver"
        run.signal(signal.SIGTERM)
        assert run.wait(10) == 0, run.stderr
    finally:
        run.kill()
        server.stop()
        if back is not None:
            back.stop()

    # retried with a doubling wait, capped at retry_max_s (2 s here)
    assert "retrying in 1 s" in run.stderr and "retrying in 2 s" in run.stderr
    assert "retrying in 4 s" not in run.stderr
    notes = [h["note"] for h in health_rows(cfg.store_path)]
    assert any(n.startswith("receiver lost at") for n in notes)
    gap_note = next(n for n in notes if n.startswith("receiver gap"))
    # "receiver gap <start> to <end> (<s> s), data resumed: <reason>"
    start, end = (parse_iso(x) for x in gap_note.split(" (")[0].split()[2::2])
    assert end - start >= OUTAGE_S

    got = archive_rows(cfg.archive_dir)
    assert any(s.t_end <= start + 1e-3 for s in got.segments), "no data before the gap"
    assert any(s.t0 >= end - 1e-3 for s in got.segments), "no data after the gap"
    # the archive's own gap list shows exactly the recorded gap
    assert any(abs(a - start) < 1e-3 and abs(b - end) < 1e-3 for a, b in got.gaps), got.gaps
    # the reconnected server got the tuning again
    assert (RTL_SET_FREQ, 20_000_000) in back.commands
    assert integrity(cfg.store_path) == "ok"
