"""rtl_tcp client against a loopback server in this file that speaks the wire protocol.

The server follows rtl_tcp's protocol (osmocom rtl-sdr, rtl_tcp.c): a 12-byte header
(b"RTL0", tuner type and gain count as big-endian u32), then cu8 samples paced at the
sample rate; it records every 5-byte command (1-byte id, big-endian u32) it receives.
"""

import socket
import struct
import threading
import time

import numpy as np
import pytest

from rxlog.errors import RxlogError
from rxlog.receive.blocks import ReceiverLost
from rxlog.receive.rtltcp import (
    TCP_SET_AGC_MODE,
    TCP_SET_BIAS_TEE,
    TCP_SET_DIRECT_SAMPLING,
    TCP_SET_FREQ,
    TCP_SET_FREQ_CORRECTION,
    TCP_SET_GAIN,
    TCP_SET_GAIN_MODE,
    TCP_SET_SAMPLE_RATE,
    RtlTcpSource,
)

RATE = 250_000            # librtlsdr's low range; keeps the loopback light
CHUNK = 2 * 2048          # bytes per send: 8.2 ms of samples


class LoopbackServer:
    def __init__(self, header=b"RTL0" + struct.pack(">II", 5, 29), drop_after_s=None, pause_s=0.0):
        self.header = header
        self.drop_after_s = drop_after_s       # close the first connection after this long
        self.pause_s = pause_s                 # wait this long before streaming on a reconnection
        self.sock = socket.create_server(("127.0.0.1", 0))
        self.port = self.sock.getsockname()[1]
        self.connections = []                  # per connection: list of (cmd, value)
        self.sent = bytearray()
        self.stop = threading.Event()
        self.thread = threading.Thread(target=self._serve, daemon=True)
        self.thread.start()

    def _serve(self):
        self.sock.settimeout(0.2)
        k = 0
        while not self.stop.is_set():
            try:
                conn, _ = self.sock.accept()
            except socket.timeout:
                continue
            cmds = []
            self.connections.append(cmds)
            threading.Thread(target=self._commands, args=(conn, cmds), daemon=True).start()
            if k > 0:
                time.sleep(self.pause_s)
            self._stream(conn, self.drop_after_s if k == 0 else None)
            k += 1

    def _commands(self, conn, cmds):
        buf = b""
        while True:
            try:
                data = conn.recv(64)
            except OSError:
                return
            if not data:
                return
            buf += data
            while len(buf) >= 5:
                cmd, value = struct.unpack(">BI", buf[:5])
                cmds.append((cmd, value))
                buf = buf[5:]

    def _stream(self, conn, drop_after):
        try:
            conn.sendall(self.header)
            t_start = time.monotonic()
            n = 0
            rng = np.random.default_rng(len(self.connections))
            while not self.stop.is_set():
                if drop_after is not None and time.monotonic() - t_start > drop_after:
                    break
                data = rng.integers(0, 256, CHUNK, dtype=np.uint8).tobytes()
                conn.sendall(data)
                self.sent += data
                n += CHUNK // 2
                lag = t_start + n / RATE - time.monotonic()
                if lag > 0:
                    time.sleep(lag)
        except OSError:
            pass
        finally:
            try:
                conn.shutdown(socket.SHUT_RDWR)        # FIN now, and wakes the command reader
            except OSError:
                pass
            conn.close()

    def close(self):
        self.stop.set()
        self.thread.join(timeout=2)
        self.sock.close()


@pytest.fixture
def server(request):
    srv = LoopbackServer(**getattr(request, "param", {}))
    yield srv
    srv.close()


def signed(v):
    return v - (1 << 32) if v >= 1 << 31 else v


def test_settings_and_retune_reach_the_server_and_samples_come_back(server):
    src = RtlTcpSource(host="127.0.0.1", port=server.port, rate_hz=RATE, gain_db=29.7, ppm=-3,
                       direct_sampling="q", bias_tee=True, center_hz=20e6)
    src.open()
    assert (src.tuner_type, src.gain_count) == (5, 29)
    blocks = [src.read(2048) for _ in range(10)]
    src.tune(17.5e6)
    blocks += [src.read(2048) for _ in range(80)]
    blocks += src.drain()
    src.close()
    cmds = server.connections[0]
    got = {}
    for c, v in cmds:
        got.setdefault(c, []).append(v)
    assert got[TCP_SET_SAMPLE_RATE] == [RATE]
    assert got[TCP_SET_DIRECT_SAMPLING] == [2]
    assert [signed(v) for v in got[TCP_SET_FREQ_CORRECTION]] == [-3]
    assert got[TCP_SET_GAIN_MODE] == [1]                  # manual
    assert got[TCP_SET_GAIN] == [297]                     # tenths of dB
    assert got[TCP_SET_AGC_MODE] == [0]
    assert got[TCP_SET_BIAS_TEE] == [1]
    assert got[TCP_SET_FREQ] == [20_000_000, 17_500_000]
    # the centre frequency is sent last at connect: the tuner is set after rate and mode
    assert cmds.index((TCP_SET_FREQ, 20_000_000)) == max(i for i, (c, _) in enumerate(cmds) if c != TCP_SET_FREQ) + 1
    # what the client decoded is what the server sent
    raw = np.frombuffer(bytes(server.sent[: 2 * sum(b.n for b in blocks)]), dtype=np.uint8).astype(np.float32)
    want = ((raw[0::2] - 127.5) + 1j * (raw[1::2] - 127.5)) / 127.5
    np.testing.assert_allclose(np.concatenate([b.samples for b in blocks]), want, atol=1e-6)
    assert [b.center_hz for b in blocks[:10]] == [20e6] * 10
    assert blocks[-1].center_hz == 17.5e6 and blocks[-1].segment != blocks[0].segment


@pytest.mark.parametrize("server", [{"drop_after_s": 0.4, "pause_s": 0.5}], indirect=True)
def test_lost_connection_is_retried_and_the_gap_recorded(server):
    src = RtlTcpSource(host="127.0.0.1", port=server.port, rate_hz=RATE, gain_db=20.0, direct_sampling="q",
                       sleep=lambda s: time.sleep(min(s, 0.05)))
    src.open()
    blocks = [src.read(2048) for _ in range(200)]        # ~1.6 s of samples: across the outage
    blocks += src.drain()
    src.close()
    assert src.reconnects == 1
    assert len(server.connections) == 2
    again = {c for c, _ in server.connections[1]}
    assert {TCP_SET_SAMPLE_RATE, TCP_SET_GAIN_MODE, TCP_SET_GAIN, TCP_SET_AGC_MODE, TCP_SET_FREQ} <= again
    dropped = np.array([b.dropped_before for b in blocks])
    biggest = int(dropped.argmax())
    # the outage: reconnect waits (>= 0.05 s) plus the server's 0.5-s pause, as samples
    assert 0.4 * RATE < dropped[biggest] < 1.5 * RATE
    # times stay continuous across the gap: the block after it starts where the count says
    t_gap = blocks[biggest].t0 - blocks[biggest - 1].t_end
    assert t_gap == pytest.approx(dropped[biggest] / RATE, abs=0.02)


@pytest.mark.parametrize("server", [{"header": b"HTTP/1.1 400"}], indirect=True)
def test_not_an_rtl_tcp_server(server):
    src = RtlTcpSource(host="127.0.0.1", port=server.port, rate_hz=RATE, direct_sampling="q")
    with pytest.raises(RxlogError, match="not an rtl_tcp server"):
        src.open()


def test_nothing_listening_and_giving_up():
    s = socket.socket()
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()                                             # a port nobody listens on
    src = RtlTcpSource(host="127.0.0.1", port=port, rate_hz=RATE, direct_sampling="q")
    with pytest.raises(RxlogError, match=f"cannot connect to rtl_tcp at 127.0.0.1:{port}"):
        src.open()
    # once streaming, a server that never comes back is reported lost after reconnect_max_s
    t = [0.0]
    src = RtlTcpSource(host="127.0.0.1", port=port, rate_hz=RATE, direct_sampling="q", reconnect_max_s=4.0,
                       sleep=lambda s: t.__setitem__(0, t[0] + s), monotonic=lambda: t[0])
    with pytest.raises(ReceiverLost, match="gave up reconnecting"):
        src._reconnect()
    assert 2.0 <= t[0] <= 4.0
