"""Health rows count a spectrum as archived once it has reached the disk, not when it is
handed to the archive writer; what the writer still holds in memory is given apart
(`spectra_buffered`). Checked against the archive itself while the logger runs."""

import signal
import time

from service_helpers import Run, archive_rows, health_rows, write_config

from rxlog.station.config import load_config

CHUNK_S = 30          # long: between flushes the writer holds many seconds of spectra


def _on_disk(cfg) -> int:
    return sum(s.n_time for s in archive_rows(cfg.archive_dir).segments)


def test_health_rows_never_count_more_than_the_disk_holds(tmp_path):
    path = write_config(tmp_path, chunk_s=CHUNK_S)
    cfg = load_config(path)
    run = Run(path)
    looks = []                      # (spectra archived according to the rows, rows on disk just after)
    try:
        run.wait_for("segment ")
        for _ in range(12):
            time.sleep(0.8)
            counted = sum(r["spectra_archived"] or 0 for r in health_rows(cfg.store_path))
            looks.append((counted, _on_disk(cfg)))
        run.signal(signal.SIGTERM)
        assert run.wait(10) == 0, run.stderr
    finally:
        run.kill()
    assert all(counted <= disk for counted, disk in looks), looks
    assert any(disk > 0 for _, disk in looks)

    rows = health_rows(cfg.store_path)
    assert any(r["spectra_buffered"] > 0 for r in rows), "no row saw spectra waiting in the writer"
    # Every row balances: what came in is on disk, waiting in the writer, or not archived.
    received = archived = not_archived = 0
    for r in rows:
        received += r["spectra_received"]
        archived += r["spectra_archived"]
        not_archived += r["spectra_not_archived"]
        assert received == archived + r["spectra_buffered"] + not_archived, r
    # After a clean stop nothing waits, and the rows' count is what the archive holds.
    assert rows[-1]["spectra_buffered"] == 0
    assert archived == _on_disk(cfg) > 0
