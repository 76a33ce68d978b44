"""Recordings: SigMF and raw I/Q files replayed as a source, checked whole before a sample is read.

``open_recording`` reads a SigMF description (``x.sigmf-meta`` beside ``x.sigmf-data``;
the core namespace only, the sigmf package is not needed) or takes a raw file's format,
rate, centre and start from its caller, checks all of it against ``rxlog.validate``, and
returns a ``RecordingSource``: the data file mapped one chunk at a time, so memory stays
flat however large the file. Each SigMF capture with its own tuning is a segment.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from rxlog import validate
from rxlog.errors import RxlogError
from rxlog.receive.blocks import FORMATS, EndOfStream, SampleBlock, to_complex64
from rxlog.timeutil import parse_iso


@dataclass
class Capture:
    """One stretch of a recording with unchanged tuning (a SigMF capture)."""

    sample_start: int        # first sample (index in the file's samples)
    n_samples: int
    byte_offset: int         # where sample_start begins in the data file
    center_hz: float
    t0: float                # POSIX seconds UTC of sample_start
    segment: str
    dropped_before: int = 0  # samples missing before this capture (from its start time)
    label: str = "--center"  # what gave its frequency, for messages ("captures[2] core:frequency")


@dataclass
class RawChunk:
    """Samples as stored in the file (interleaved I/Q components), with their time."""

    data: np.ndarray         # (2n,) components in the file's dtype (a mapped view: use, then drop)
    fmt: str
    t0: float
    center_hz: float
    rate_hz: float
    segment: str
    dropped_before: int

    @property
    def n(self) -> int:
        return self.data.size // 2


class RecordingSource:
    """A recording replayed as a source: SigMF or raw interleaved I/Q, read in bounded chunks.

    The data file is mapped (numpy memmap) one chunk at a time and unmapped after it,
    so memory stays flat however large the file. Samples come as fast as they can be
    read; times come from the recording (``core:datetime`` or the given start).
    """

    kind = "recording"

    def __init__(self, data_path, fmt: str, rate_hz: float, captures: list[Capture], gain_db: float = math.nan,
                 source=None):
        if fmt not in FORMATS:
            raise RxlogError(f"{data_path}: sample format {fmt!r} not supported; expected one of "
                             f"{', '.join(FORMATS)}")
        self.data_path = Path(data_path)
        self.source = Path(source or data_path)      # the file that describes it (SigMF metadata)
        self.fmt = fmt
        self.rate_hz = float(rate_hz)
        self.captures = captures
        self.gain_db = float(gain_db)
        self._dtype = FORMATS[fmt][0]
        self._k = 0          # capture being read
        self._pos = 0        # samples read within it
        self.is_open = False

    @property
    def bytes_per_sample(self) -> int:
        return 2 * self._dtype.itemsize

    @property
    def n_samples(self) -> int:
        return sum(c.n_samples for c in self.captures)

    @property
    def center_hz(self) -> float:
        return self.captures[min(self._k, len(self.captures) - 1)].center_hz

    @property
    def segment(self) -> str:
        return self.captures[min(self._k, len(self.captures) - 1)].segment

    @property
    def t0(self) -> float:
        return self.captures[0].t0

    @property
    def duration_s(self) -> float:
        return self.n_samples / self.rate_hz

    def open(self) -> None:
        try:
            with open(self.data_path, "rb"):
                pass
        except OSError as e:
            raise RxlogError(f"{self.data_path}: cannot read the recording ({e.strerror or e})") from None
        self._k, self._pos = 0, 0
        self.is_open = True

    def close(self) -> None:
        self.is_open = False

    def tune(self, center_hz: float) -> None:
        raise RxlogError(f"{self.data_path}: a recording cannot be retuned; use [sweep] mode = \"single\"")

    def read_raw(self, n_samples: int) -> RawChunk:
        """Up to ``n_samples`` samples as stored, never across a capture boundary."""
        while self._k < len(self.captures) and self._pos >= self.captures[self._k].n_samples:
            self._k += 1
            self._pos = 0
        if self._k >= len(self.captures):
            raise EndOfStream(str(self.data_path))
        cap = self.captures[self._k]
        n = int(min(n_samples, cap.n_samples - self._pos))
        offset = cap.byte_offset + self._pos * self.bytes_per_sample
        try:
            data = np.memmap(self.data_path, dtype=self._dtype, mode="r", offset=offset, shape=(2 * n,))
        except (OSError, ValueError) as e:      # shortened or removed while being read
            raise RxlogError(f"{self.data_path}: cannot read samples at byte {offset} ({e}); "
                             "was the file changed while it was read?") from None
        chunk = RawChunk(data, self.fmt, cap.t0 + self._pos / self.rate_hz, cap.center_hz, self.rate_hz,
                         cap.segment, cap.dropped_before if self._pos == 0 else 0)
        self._pos += n
        return chunk

    def read(self, n_samples: int) -> SampleBlock:
        c = self.read_raw(n_samples)
        x = to_complex64(c.data, c.fmt)
        return SampleBlock(x, c.t0, c.center_hz, c.rate_hz, self.gain_db, c.segment, c.dropped_before)

    def meta(self) -> dict:
        return {"receiver": "recording", "recording": self.data_path.name, "rate_hz": self.rate_hz,
                "sample_format": self.fmt}

    def __enter__(self):
        self.open()
        return self

    def __exit__(self, *exc):
        self.close()


def sigmf_paths(path: Path) -> tuple[Path, Path] | None:
    name = path.name
    for suffix in (".sigmf-meta", ".sigmf-data", ".sigmf"):
        if name.endswith(suffix):
            base = path.with_name(name[: -len(suffix)])
            return base.with_name(base.name + ".sigmf-meta"), base.with_name(base.name + ".sigmf-data")
    meta = path.with_name(name + ".sigmf-meta")
    if meta.is_file():
        return meta, path.with_name(name + ".sigmf-data")
    return None


# A .sigmf-meta larger than this is refused unread: a whole day retuned every second is
# ~10 MB of JSON, so anything bigger is not metadata.
MAX_SIGMF_META_BYTES = 64 * 1024 * 1024

# A capture may start up to this long before the previous one ends by its sample count:
# recorders stamp core:datetime from the host clock when the retune is asked for, while
# librtlsdr still holds ~0.8 s of queued buffers (15 x 256 KiB at 2.4 MS/s). More overlap
# than this is not a clock quirk but captures out of order.
CAPTURE_OVERLAP_S = 1.0


def open_recording(path, fmt: str | None = None, rate_hz: float | None = None,
                   center_hz: float | None = None, start=None) -> RecordingSource:
    """A SigMF recording (``x.sigmf-meta`` / ``x.sigmf-data``) or a raw I/Q file.

    Raw files need ``fmt`` (cu8, ci8, ci16_le, cf32_le), ``rate_hz``, ``center_hz`` and
    ``start`` (ISO 8601 UTC text or POSIX seconds). For SigMF, ``start`` (if given)
    overrides the first capture's ``core:datetime``. Everything the description says is
    checked here, before a sample is read: types, finite values, rates and frequencies in
    range (``rxlog.validate``), times within the receiver era, and the data file's length
    against the metadata. RxlogError names the file and the key or option.
    """
    path = Path(path)
    if fmt in (None, "", "sigmf"):
        paths = sigmf_paths(path)
        if paths is not None:
            return _open_sigmf(*paths, start=start)
        if fmt == "sigmf":
            raise RxlogError(f"{path}: no SigMF metadata ({path.name}.sigmf-meta) found")
    missing = [opt for opt, v in (("--format", fmt), ("--rate", rate_hz), ("--center", center_hz),
                                  ("--start", start)) if v is None or (isinstance(v, str) and not v)]
    if missing:
        raise RxlogError(f"{path}: a raw recording (not SigMF) needs {', '.join(missing)} "
                         "(sample format, sample rate in Hz, centre frequency in Hz, start time in UTC)")
    if not isinstance(fmt, str) or fmt not in FORMATS:
        raise RxlogError(f"{path}: --format {fmt!r} not supported; expected one of {', '.join(FORMATS)}")
    if not path.is_file():
        raise RxlogError(f"{path}: recording not found")
    t0 = _start_time(start, f"{path}: --start")
    rate = validate.number(rate_hz, f"{path}: --rate", validate.MIN_RATE_HZ, validate.MAX_RATE_HZ,
                           "a sample rate in Hz")
    center = validate.number(center_hz, f"{path}: --center", 1.0, validate.MAX_TUNING_HZ,
                             "a centre frequency in Hz")
    bps = 2 * FORMATS[fmt][0].itemsize
    size = path.stat().st_size
    if size % bps:
        raise RxlogError(f"{path}: {size} bytes is not a whole number of {fmt} samples ({bps} bytes each); "
                         "is --format right, or is the file cut short?")
    n = size // bps
    if n == 0:
        raise RxlogError(f"{path}: no complete {fmt} sample in the file")
    validate.check_era(t0, t0 + n / rate, f"{path}: --start")
    cap = Capture(0, n, 0, center, t0, f"rec-{path.stem}-0")
    return RecordingSource(path, fmt, rate, [cap])


def _start_time(start, what: str) -> float:
    if validate.is_number(start):
        t = float(start)
    else:
        try:
            t = parse_iso(start)
        except (TypeError, ValueError, OverflowError) as e:
            raise RxlogError(f"{what}: {e}") from None
    validate.check_era(t, None, what)
    return t


def _read_sigmf_json(meta_path: Path):
    where = str(meta_path)
    try:
        return json.loads(validate.read_capped(meta_path, MAX_SIGMF_META_BYTES, "SigMF metadata").decode("utf-8"))
    except FileNotFoundError:
        raise RxlogError(f"{where}: SigMF metadata file not found") from None
    except (OSError, UnicodeDecodeError, RecursionError, ValueError) as e:   # JSONDecodeError is a ValueError
        raise RxlogError(f"{where}: unreadable SigMF metadata ({str(e)[:120]}); expected JSON text") from None


def _optional_whole(c: dict, key: str, where: str) -> int:
    """A SigMF byte count that may be absent (or null): 0 then."""
    v = c.get(key)
    return 0 if v is None else validate.whole(v, f"{where} {key}")


def _open_sigmf(meta_path: Path, data_path: Path, start=None) -> RecordingSource:
    """Read SigMF metadata (core namespace) into captures. The sigmf package is not needed.

    The whole description is checked before anything is read from the data file: see
    ``open_recording``.
    """
    where = str(meta_path)
    dtype, rate, trailing, caps = _sigmf_global(_read_sigmf_json(meta_path), where)
    if not data_path.is_file():
        raise RxlogError(f"{data_path}: SigMF data file not found beside {meta_path.name}")
    starts, freqs, byte_offsets, total = _sigmf_layout(caps, dtype, trailing, meta_path, data_path)
    captures: list[Capture] = []
    stem = data_path.name[: -len(".sigmf-data")] if data_path.name.endswith(".sigmf-data") else data_path.stem
    for i, c in enumerate(caps):
        end = starts[i + 1] if i + 1 < len(caps) else total
        n = end - starts[i]
        if n <= 0:
            continue
        t0, said = _capture_time(c, i, start, captures, starts[i], rate, where)
        validate.check_era(t0, t0 + n / rate, said)
        freq = freqs[i]
        dropped, segment = 0, f"rec-{stem}-{len(captures)}"
        if captures:
            prev = captures[-1]
            expected = prev.t0 + prev.n_samples / rate
            if t0 < expected - CAPTURE_OVERLAP_S:
                raise RxlogError(f"{said}: starts at {validate.when(t0)}, {expected - t0:.3g} s before the end "
                                 f"of the capture before it; expected captures in time order")
            gap = int(round((t0 - expected) * rate))
            dropped = max(0, gap)
            if freq == prev.center_hz and gap >= 0:
                segment = prev.segment          # same tuning: one segment, with a gap if any
        captures.append(Capture(starts[i], n, byte_offsets[i], freq, t0, segment, dropped,
                                label=f"captures[{i}] core:frequency"))
    if not captures:
        raise RxlogError(f"{data_path}: no samples in the data file")
    return RecordingSource(data_path, dtype, rate, captures, source=meta_path)


def _sigmf_global(meta, where: str) -> tuple[str, float, int, list]:
    """The checked global object of SigMF metadata: (datatype, sample rate, trailing bytes, captures)."""
    g = meta.get("global") if isinstance(meta, dict) else None
    if not isinstance(g, dict):
        raise RxlogError(f"{where}: no 'global' object; expected SigMF metadata "
                         "{\"global\": {...}, \"captures\": [...]}")
    dtype = g.get("core:datatype")
    if not isinstance(dtype, str) or dtype not in FORMATS:
        raise RxlogError(f"{where}: global core:datatype {dtype!r} not supported; expected one of "
                         f"{', '.join(FORMATS)} (complex samples)")
    rate = validate.number(g.get("core:sample_rate"), f"{where}: global core:sample_rate",
                           validate.MIN_RATE_HZ, validate.MAX_RATE_HZ, "a sample rate in Hz")
    n_chan = g.get("core:num_channels", 1)
    if validate.whole(n_chan, f"{where}: global core:num_channels", 1) != 1:
        raise RxlogError(f"{where}: global core:num_channels = {n_chan}; rxlog reads one channel")
    trailing = _optional_whole(g, "core:trailing_bytes", f"{where}: global")
    caps = meta.get("captures")
    if not isinstance(caps, list) or not caps:
        raise RxlogError(f"{where}: no captures; expected at least one with core:frequency")
    return dtype, rate, trailing, caps


def _sigmf_layout(caps: list, dtype: str, trailing: int, meta_path: Path,
                  data_path: Path) -> tuple[list[int], list[float], list[int], int]:
    """Where each capture lies in the data file, checked against its length:
    (first samples, frequencies, byte offsets, samples in the file)."""
    where = str(meta_path)
    bps = 2 * FORMATS[dtype][0].itemsize
    size = data_path.stat().st_size
    starts, freqs, byte_offsets, headers = [], [], [], 0
    for i, c in enumerate(caps):
        at = f"{where}: captures[{i}]"
        if not isinstance(c, dict):
            raise RxlogError(f"{at}: expected an object with core:sample_start and core:frequency, got {c!r:.40}")
        s = validate.whole(c.get("core:sample_start", 0 if i == 0 else None), f"{at} core:sample_start")
        if starts and s < starts[-1]:
            raise RxlogError(f"{at} core:sample_start {s} goes backwards (captures[{i - 1}] starts at {starts[-1]})")
        freqs.append(validate.number(c.get("core:frequency"), f"{at} core:frequency", 1.0,
                                     validate.MAX_TUNING_HZ, "a centre frequency in Hz"))
        headers += _optional_whole(c, "core:header_bytes", at)
        starts.append(s)
        byte_offsets.append(headers + s * bps)
    payload = size - trailing - headers
    if payload < 0:
        raise RxlogError(f"{data_path}: {size} bytes, fewer than the {headers + trailing} header and trailing "
                         f"bytes {meta_path.name} declares")
    if payload % bps:
        raise RxlogError(f"{data_path}: {payload} bytes of samples is not a whole number of {dtype} samples "
                         f"({bps} bytes each); is core:datatype right, or is the file cut short?")
    total = payload // bps
    for i, s in enumerate(starts):
        if s > total:
            raise RxlogError(f"{where}: captures[{i}] core:sample_start {s} lies past the end of the data: "
                             f"{data_path.name} holds {total} {dtype} samples")
    return starts, freqs, byte_offsets, total


def _capture_time(c: dict, i: int, start, captures: list[Capture], sample_start: int, rate: float,
                  where: str) -> tuple[float, str]:
    """UTC of a capture's first sample, and what gave it (for messages)."""
    if i == 0 and start is not None and not (isinstance(start, str) and not start):
        return _start_time(start, f"{where}: --start"), f"{where}: --start"
    said = f"{where}: captures[{i}] core:datetime"
    text = c.get("core:datetime")
    if text is not None:
        try:
            return parse_iso(text), said
        except (TypeError, ValueError, OverflowError):
            raise RxlogError(f"{said} {text!r:.60} is not ISO 8601 UTC "
                             "(expected e.g. \"2026-12-01T22:00:00Z\")") from None
    if captures:
        prev = captures[-1]
        return prev.t0 + (sample_start - prev.sample_start) / rate, said
    raise RxlogError(f"{where}: captures[0] has no core:datetime; give the start time (--start)")

