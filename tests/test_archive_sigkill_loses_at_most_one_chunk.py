"""A writer process killed with SIGKILL at any instant leaves only archive files that
open and loses at most the last 60 s; the next writer cleans up and consolidates."""

import os
import signal
import subprocess
import sys

import numpy as np
import pytest
from archive_helpers import STATION, T_NIGHT
from astropy.io import fits

from rxlog.archive.read import read_archive
from rxlog.archive.write import ArchiveWriter

CHILD = r"""
import sys
import numpy as np
from rxlog.archive.write import ArchiveWriter
from rxlog.spectrum import DynamicSpectrum, channel_grid

root, t0 = sys.argv[1], float(sys.argv[2])
w = ArchiveWriter(root, {"name": "test-station", "latitude_deg": 47.5, "longitude_deg": 8.7})
f = channel_grid(16.0, 24.0, 256)
rng = np.random.default_rng(1)
i = 0
while True:
    print(i, flush=True)                          # row i is being handed to the writer
    p = (-60.0 + rng.normal(0.0, 0.11, (1, f.size))).astype(np.float32)
    p[0, 0] = i                                    # row number, to check order and duplicates
    w.write(DynamicSpectrum(p, t0 + i, 1.0, f, segment="live"))
    i += 1
"""

T0 = T_NIGHT - 180.0          # the hour changes at row 180: the kill at 181 hits consolidation


@pytest.mark.parametrize("kill_at", [150, 179, 181])
def test_sigkill_mid_chunk(tmp_path, kill_at):
    root = tmp_path / "archive"
    child = subprocess.Popen([sys.executable, "-c", CHILD, str(root), repr(T0)],
                             stdout=subprocess.PIPE, text=True)
    try:
        for line in child.stdout:
            if int(line) >= kill_at:
                os.kill(child.pid, signal.SIGKILL)
                break
    finally:
        child.kill()
        child.wait(timeout=30)
    assert child.returncode == -signal.SIGKILL

    # Every archive file opens and its data decompress.
    fits_files = sorted(root.rglob("*.fits"))
    assert fits_files
    for path in fits_files:
        with fits.open(path) as hdul:
            for hdu in hdul:
                if hdu.is_image:
                    _ = hdu.data

    # The data on disk reach at least 60 s before the row being written at the kill.
    before = read_archive(root, T0, T0 + 10_000).segments
    rows_on_disk = np.round(np.concatenate([s.power_db[:, 0] for s in before]))
    assert rows_on_disk.max() >= kill_at - 60

    # The next writer removes temporary files and consolidates the chunks.
    ArchiveWriter(root, STATION).close()
    left = [p.name for p in root.rglob("*") if p.is_file() and p.name != ".rxlog-archive.lock"]
    assert not [n for n in left if n.endswith(".tmp") or ".chunk." in n]
    after = read_archive(root, T0, T0 + 10_000)
    assert len(after.segments) == 1 and after.gaps[:-1] == []
    rows = np.round(after.segments[0].power_db[:, 0]).astype(int)
    assert np.array_equal(rows, np.arange(rows.size))          # in order, no duplicates, no holes
    assert rows.size >= kill_at - 60
