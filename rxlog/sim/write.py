"""Simulations written to files: FITS dynamic spectra (one file, or the archive's layout)
or a SigMF recording, each with its truth CSV beside it.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

# Writing simulated spectra as an archive is the one place the simulator reaches the
# archive's stage above it; the archive never imports the simulator.
from rxlog.archive.write import ArchiveWriter, write_spectrum_fits
from rxlog.errors import RxlogError
from rxlog.sim.interference import check_rfi_category
from rxlog.sim.iq import SimulatedReceiver
from rxlog.sim.spectra import iter_spectra, simulate_spectra
from rxlog.sim.truth import write_truth_csv
from rxlog.timeutil import iso


def write_sigmf(samples: np.ndarray, path, rate_hz: float, center_hz: float, start_unix: float,
                description: str = "") -> tuple[Path, Path]:
    """A SigMF recording (``path.sigmf-meta`` + ``path.sigmf-data``) of cu8 or complex64 samples."""
    base = Path(path)
    for suffix in (".sigmf-meta", ".sigmf-data", ".sigmf"):
        if base.name.endswith(suffix):
            base = base.with_name(base.name[: -len(suffix)])
    base.parent.mkdir(parents=True, exist_ok=True)
    meta_p, data_p = base.with_name(base.name + ".sigmf-meta"), base.with_name(base.name + ".sigmf-data")
    dtype = "cu8" if samples.dtype == np.uint8 else "cf32_le"
    data = samples if dtype == "cu8" else np.asarray(samples, dtype=np.complex64).view("<f4")
    data.tofile(data_p)
    meta = {"global": {"core:datatype": dtype, "core:sample_rate": float(rate_hz), "core:version": "1.0.0",
                       "core:recorder": "rxlog simulator", "core:description": description},
            "captures": [{"core:sample_start": 0, "core:frequency": float(center_hz),
                          "core:datetime": iso(start_unix)}],
            "annotations": []}
    meta_p.write_text(json.dumps(meta, indent=2) + "\n", encoding="utf-8")
    return meta_p, data_p


def write_simulation(cfg, start_unix: float, hours: float, out, iq: bool = False, seed: int | None = None,
                     rfi: str | None = None, center_hz: float | None = None, progress=None) -> dict:
    """Simulate and write: FITS spectra (one file for ``out`` ending in .fits, else the
    archive's layout under the folder ``out``) or a SigMF recording (``iq``), plus the
    truth CSV beside it. ``progress(done, total)`` is called per chunk. Returns a summary
    (paths, rows or samples, truth rows). ``seed``/``rfi`` default to [receiver] sim_seed/sim_rfi."""
    out = Path(out)
    seed = int(cfg["receiver"]["sim_seed"] if seed is None else seed)
    rfi = check_rfi_category(cfg["receiver"]["sim_rfi"] if rfi is None else rfi)
    if iq:
        return _write_iq(cfg, start_unix, hours, out, seed, rfi, center_hz, progress)
    station = cfg["station"]
    lossless = cfg["storage"]["lossless"]
    done = 0
    if out.suffix.lower() in (".fits", ".fit", ".fts"):
        spec, truth = simulate_spectra(cfg, start_unix, hours, seed=seed, rfi=rfi)
        path = write_spectrum_fits(spec, out, station, lossless=lossless)
        truth_path = out.with_name(out.stem + ".truth.csv")
        done = spec.n_time
        if progress:
            progress(done, done)
    else:
        path = out
        run = iter_spectra(cfg, start_unix, hours, seed=seed, rfi=rfi)
        with ArchiveWriter(out, station, lossless=lossless) as w:
            for spec in run:
                w.write(spec)
                done += spec.n_time
                if progress:
                    progress(done, run.n_rows)
        truth = run.truth_rows()
        truth_path = out / "truth.csv"
    write_truth_csv(truth, truth_path)
    return {"path": path, "truth_path": truth_path, "rows": done, "truth_rows": len(truth)}


def _write_iq(cfg, start_unix, hours, out, seed, rfi, center_hz, progress):
    rate = float(cfg["receiver"]["sample_rate_hz"])
    sp = cfg["spectra"]
    center = 0.5 * (sp["fmin_mhz"] + sp["fmax_mhz"]) * 1e6 if center_hz is None else float(center_hz)
    total = int(round(hours * 3600 * rate))
    if total <= 0:
        raise RxlogError(f"hours: {hours!r} gives no samples at {rate:.0f} samples/s")
    rx = SimulatedReceiver(cfg, start_unix=start_unix, seed=seed, realtime=False, rfi=rfi, hours=hours)
    rx.center_hz = center
    rx.open()
    gen = rx._gen
    meta_p, data_p = write_sigmf(np.zeros(0, np.uint8), out, rate, center, start_unix,
                                 description=f"rxlog simulator, seed {seed}, rfi {rfi}, station {cfg['station']['name']}")
    done = 0
    with open(data_p, "ab") as fh:
        while done < total:
            n = min(int(rate), total - done)
            gen.read(n).tofile(fh)
            done += n
            rx._count = done
            if progress:
                progress(done, total)
    truth = rx.truth_rows()
    truth_path = meta_p.with_name(meta_p.name[: -len(".sigmf-meta")] + ".truth.csv")
    write_truth_csv(truth, truth_path)
    return {"path": meta_p, "truth_path": truth_path, "samples": done, "truth_rows": len(truth)}
