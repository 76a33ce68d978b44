"""Shared by the logger's tests: small station configs, `rxlog run` as a real process,
reading back what it stored, and a loopback rtl_tcp server."""

from __future__ import annotations

import os
import queue
import signal
import socket
import sqlite3
import struct
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]

# A light station: 64 channels every 0.25 s, chunks flushed every second, health every
# half second, so every fault shows within seconds and the tests stay short.
BASE = """
[station]
name = "faulty"
latitude_deg = 47.5
longitude_deg = 8.7
[spectra]
fmin_mhz = {fmin}
fmax_mhz = {fmax}
channels = 64
cadence_s = 0.25
[storage]
root = "{root}"
retention_days = 30
[sweep]
{sweep}
[service]
chunk_s = {chunk_s}
health_interval_s = {health_s}
disk_min_free_mb = {disk_min}
retry_max_s = 2
clock_step_s = 0.5
log_level = "debug"
{service}
[receiver]
{receiver}
"""

SPECTRA = dict(fmin=16.0, fmax=24.0, sweep="cycle_s = 0.25", service='sim_feed = "spectra"',
               receiver='kind = "simulated"')
# One 250 kS/s window at 20 MHz (librtlsdr accepts 225001-300000 S/s), through the channelizer.
NARROW_IQ = dict(fmin=19.92, fmax=20.08, sweep='mode = "single"\nfft_size = 256\nbuffer_samples = 8192\nring_s = 0',
                 service='sim_feed = "iq"', receiver='kind = "simulated"\nsample_rate_hz = 250000')


def write_config(tmp_path: Path, root: Path | None = None, disk_min: float = 1.0, chunk_s: float = 1,
                 health_s: float = 0.5, **kw) -> Path:
    values = dict(SPECTRA, root=root or tmp_path / "store", disk_min=disk_min, chunk_s=chunk_s, health_s=health_s)
    values.update(kw)
    path = tmp_path / "station.toml"
    path.write_text(BASE.format(**values), encoding="utf-8")
    return path


class Run:
    """`python -m rxlog run` as a child process; stderr lines collected by a thread."""

    def __init__(self, config: Path, *args, env: dict | None = None):
        self.config = config
        full_env = dict(os.environ, PYTHONUNBUFFERED="1")
        full_env.pop("NOTIFY_SOCKET", None)
        full_env.pop("JOURNAL_STREAM", None)
        full_env.update(env or {})
        self.started = time.time()
        self.proc = subprocess.Popen([sys.executable, "-m", "rxlog", "run", "--config", str(config), *args],
                                     stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                                     env=full_env, cwd=REPO)
        self.lines: list[str] = []
        self.seen: list[float] = []             # wall time each line arrived
        self._new: queue.Queue = queue.Queue()
        self._reader = threading.Thread(target=self._read, daemon=True)
        self._reader.start()

    def _read(self):
        for line in self.proc.stderr:
            line = line.rstrip("\n")
            self.seen.append(time.time())
            self.lines.append(line)
            self._new.put(line)

    def wait_for(self, text: str, timeout: float = 30.0) -> float:
        """Wait for a stderr line containing ``text``; return the wall time it was seen."""
        if any(text in ln for ln in self.lines):
            return time.time()
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            try:
                line = self._new.get(timeout=0.1)
            except queue.Empty:
                if self.proc.poll() is not None and self._new.empty():
                    break
                continue
            if text in line:
                return time.time()
        raise AssertionError(f"no line with {text!r} within {timeout} s; stderr:\n" + "\n".join(self.lines[-30:]))

    def seen_at(self, text: str) -> float:
        """Wall time the first stderr line containing ``text`` arrived."""
        return next(t for t, ln in zip(self.seen, self.lines) if text in ln)

    def signal(self, sig) -> float:
        t = time.time()
        self.proc.send_signal(sig)
        return t

    def wait(self, timeout: float = 30.0) -> int:
        rc = self.proc.wait(timeout)
        self._reader.join(5)
        return rc

    def stop(self) -> int:
        if self.proc.poll() is None:
            self.signal(signal.SIGTERM)
        return self.wait()

    def kill(self):
        if self.proc.poll() is None:
            self.proc.kill()
        self.proc.wait(10)
        self._reader.join(5)

    @property
    def stderr(self) -> str:
        return "\n".join(self.lines)


def health_rows(store_path: Path) -> list[dict]:
    conn = sqlite3.connect(f"file:{store_path}?mode=ro", uri=True)
    conn.row_factory = sqlite3.Row
    try:
        return [dict(r) for r in conn.execute("select * from health order by rowid")]
    finally:
        conn.close()


def integrity(store_path: Path) -> str:
    conn = sqlite3.connect(str(store_path))
    try:
        return conn.execute("PRAGMA integrity_check").fetchone()[0]
    finally:
        conn.close()


def archive_rows(archive_dir: Path):
    """(segment id, row start times) of every archived row, read back through the archive reader."""
    from rxlog.archive.read import read_archive

    got = read_archive(archive_dir, 0, 4e9, fill_gaps_up_to_s=0)
    return got


def open_every_fits(archive_dir: Path) -> int:
    """Open each FITS file under the archive with astropy and decompress every image; return the count."""
    from astropy.io import fits

    n = 0
    for p in sorted(Path(archive_dir).rglob("*.fits")):
        with fits.open(p) as hdul:
            for hdu in hdul:
                data = hdu.data
                if data is None:
                    continue
                if isinstance(hdu, (fits.BinTableHDU, fits.TableHDU)):
                    for name in data.names:
                        np.asarray(data[name]).sum()
                else:
                    np.asarray(data, dtype=np.float64).sum()
        n += 1
    return n


# -- a loopback rtl_tcp server -----------------------------------------------------------------

class RtlTcpServer:
    """Speaks the server side of rtl_tcp: a 12-byte header (b"RTL0", tuner type, gain count,
    big-endian u32), then cu8 noise paced at ``rate`` samples/s; 5-byte commands are read
    and kept. ``stop()`` drops the connection and stops listening (the dongle is gone);
    ``start()`` listens again on the same port."""

    def __init__(self, rate: float = 250_000, port: int = 0):
        self.rate = rate
        self.port = port
        self.commands: list[tuple[int, int]] = []
        self._stop = threading.Event()
        self._threads: list[threading.Thread] = []
        self._socks: list[socket.socket] = []
        self.connections = 0

    def start(self):
        srv = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        srv.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        srv.bind(("127.0.0.1", self.port))
        self.port = srv.getsockname()[1]
        srv.listen(2)
        srv.settimeout(0.2)
        self._stop.clear()
        self._socks = [srv]
        t = threading.Thread(target=self._serve, args=(srv,), daemon=True)
        t.start()
        self._threads = [t]
        return self

    def _serve(self, srv):
        while not self._stop.is_set():
            try:
                conn, _ = srv.accept()
            except (socket.timeout, OSError):
                continue
            self.connections += 1
            self._socks.append(conn)
            threading.Thread(target=self._stream, args=(conn,), daemon=True).start()

    def _stream(self, conn):
        rng = np.random.default_rng(self.connections)
        try:
            conn.sendall(b"RTL0" + struct.pack(">II", 5, 29))   # R820T, 29 gain steps
            conn.setblocking(False)
            t0, sent, buf = time.monotonic(), 0, b""
            block = int(self.rate // 50)
            while not self._stop.is_set():
                try:
                    buf += conn.recv(4096)
                except BlockingIOError:
                    pass
                while len(buf) >= 5:
                    self.commands.append(struct.unpack(">BI", buf[:5]))
                    buf = buf[5:]
                due = t0 + sent / self.rate
                if time.monotonic() < due:
                    time.sleep(min(0.005, due - time.monotonic()))
                    continue
                iq = np.clip(np.round(127.5 + 12 * rng.standard_normal(2 * block)), 0, 255).astype(np.uint8)
                view = memoryview(iq.tobytes())
                while view and not self._stop.is_set():
                    try:
                        k = conn.send(view)
                        view = view[k:]
                    except BlockingIOError:
                        time.sleep(0.002)
                sent += block
        except OSError:
            pass
        finally:
            conn.close()

    def stop(self):
        self._stop.set()
        for s in self._socks:
            try:
                s.shutdown(socket.SHUT_RDWR)
            except OSError:
                pass
            s.close()
        for t in self._threads:
            t.join(2)
