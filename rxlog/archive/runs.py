"""Runs: pieces of spectra of one segment on one time grid joined into one, never resampled.

A run is a stretch of one segment on one regular time grid with the same channels,
cadence and receiver settings (``run_key``). Rows present in several pieces (a chunk
already consolidated into its hour file) are taken once; rows no piece covers are NaN
with FLAG_GAP.
"""

from __future__ import annotations

import math

import numpy as np

from rxlog.archive.layout import time_tolerance
from rxlog.spectrum import FLAG_GAP, DynamicSpectrum


def run_key(spec: DynamicSpectrum) -> tuple:
    """What must not change inside a run: segment, cadence, channels, receiver settings."""
    return (spec.segment, float(spec.cadence_s), spec.freq_hz.tobytes(), spec.chan_offset_s.tobytes(),
            tuple(sorted((k, type(v).__name__, v) for k, v in spec.meta.items())))


def _aligned(t_a: float, t_b: float, cadence: float) -> bool:
    k = (t_b - t_a) / cadence
    return abs(k - round(k)) * cadence <= time_tolerance(cadence)


def _assemble(pieces: list[DynamicSpectrum]) -> DynamicSpectrum:
    """Pieces of one key on one grid -> one spectrum; rows no piece covers are NaN + FLAG_GAP."""
    first = min(pieces, key=lambda p: p.t0)
    cad, t0 = first.cadence_s, first.t0
    if len(pieces) == 1:
        return first
    end = max(round((p.t_end - t0) / cad) for p in pieces)
    power = np.full((end, first.n_chan), np.nan, dtype=np.float32)
    flags = np.full((end, first.n_chan), FLAG_GAP, dtype=np.uint8)
    for p in sorted(pieces, key=lambda p: p.t0):
        i = round((p.t0 - t0) / cad)
        power[i:i + p.n_time] = p.power_db
        flags[i:i + p.n_time] = p.flags
    return DynamicSpectrum(power_db=power, t0=t0, cadence_s=cad, freq_hz=first.freq_hz, flags=flags,
                           chan_offset_s=first.chan_offset_s, segment=first.segment, meta=dict(first.meta))


def merge_runs(pieces: list[tuple[DynamicSpectrum, bool]], max_fill_s: float = math.inf) -> list[tuple[DynamicSpectrum, bool]]:
    """Join pieces of the same key lying on one time grid into runs, filling gaps of at
    most ``max_fill_s`` with NaN + FLAG_GAP rows. Rows present in several pieces (a chunk
    already consolidated into its hour file) are taken once."""
    groups: dict[tuple, list] = {}
    for spec, lossless in pieces:
        groups.setdefault(run_key(spec), []).append((spec, lossless))
    out = []
    for members in groups.values():
        members.sort(key=lambda m: m[0].t0)
        runs: list[list] = []                                # [pieces, lossless, t_end]
        for spec, lossless in members:
            cad = spec.cadence_s
            for run in runs:
                if _aligned(run[0][0].t0, spec.t0, cad) and spec.t0 - run[2] <= max_fill_s + time_tolerance(cad):
                    run[0].append(spec)
                    run[1] = run[1] or lossless
                    run[2] = max(run[2], spec.t_end)
                    break
            else:
                runs.append([[spec], lossless, spec.t_end])
        out.extend((_assemble(r[0]), r[1]) for r in runs)
    out.sort(key=lambda m: (m[0].t0, m[0].segment))
    return out


def split_gap_rows(spec: DynamicSpectrum, max_fill_s: float) -> list[DynamicSpectrum]:
    """Trim rows without data at either end and split where more than ``max_fill_s`` of
    them follow each other."""
    empty = (spec.flags & FLAG_GAP).astype(bool).all(axis=1)
    if not empty.any():
        return [spec]
    good = np.flatnonzero(~empty)
    if good.size == 0:
        return []
    breaks = np.flatnonzero(np.diff(good) - 1 > max_fill_s / spec.cadence_s + 1e-9)
    starts = np.concatenate([[good[0]], good[breaks + 1]])
    ends = np.concatenate([good[breaks], [good[-1]]]) + 1
    return [spec.slice_rows(int(a), int(b)) for a, b in zip(starts, ends)]
