"""The season's tables as CSV files and its page (index.html) linking plots and tables."""

from __future__ import annotations

import csv
import html
import io
import math
from pathlib import Path

from rxlog import fileio
from rxlog.season.occurrence import OccurrenceMap


def _fmt(v) -> str:
    if isinstance(v, float):
        return "" if math.isnan(v) else f"{v:.6g}"
    return "" if v is None else str(v)


def write_csv(path: Path, rows: list[dict]) -> Path:
    """Rows (dicts with the same keys) as CSV, floats to 6 significant digits, NaN empty."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    if rows:
        w.writerow(list(rows[0]))
        for r in rows:
            w.writerow([_fmt(v) for v in r.values()])
    return fileio.write_atomic(path, buf.getvalue(), what="season table")


def map_rows(m: OccurrenceMap) -> list[dict]:
    """An occurrence map as one row per observed bin (exposure > 0)."""
    out = []
    nb = m.p.shape[0]
    for i in range(nb):
        for j in range(nb):
            if m.exposure_s[i, j] > 0:
                out.append({"cml3_from_deg": i * m.bin_deg, "io_phase_from_deg": j * m.bin_deg,
                            "exposure_h": float(m.exposure_s[i, j] / 3600.0),
                            "emission_h": float(m.emission_s[i, j] / 3600.0), "probability": float(m.p[i, j]),
                            "wilson_lo": float(m.lo[i, j]), "wilson_hi": float(m.hi[i, j])})
    return out


def _table(rows: list[dict], limit: int = 40) -> str:
    if not rows:
        return "<p>none</p>"
    head = "".join(f"<th>{html.escape(k)}</th>" for k in rows[0])
    body = "".join("<tr>" + "".join(f"<td>{html.escape(_fmt(v))}</td>" for v in r.values()) + "</tr>"
                   for r in rows[:limit])
    more = f"<p>{len(rows) - limit} more rows in the CSV.</p>" if len(rows) > limit else ""
    return f"<table><tr>{head}</tr>{body}</table>{more}"


PAGE_CSS = ("body{font-family:sans-serif;max-width:70em;margin:1em auto;color:#222}"
            "table{border-collapse:collapse;font-size:0.85em}td,th{border:1px solid #ccc;padding:2px 6px}"
            "img{max-width:100%}h2{margin-top:1.6em}")


def write_page(out: Path, title: str, summary: list[str], sections: list[tuple[str, str | None, list[dict], str]]) -> Path:
    """index.html: a title, summary lines, then per section (heading, PNG name or None,
    table rows, CSV name) the plot, the table and a link to the CSV."""
    parts = [f"<!doctype html><html><head><meta charset='utf-8'><title>{html.escape(title)}</title>"
             f"<style>{PAGE_CSS}</style></head><body><h1>{html.escape(title)}</h1>"]
    parts += [f"<p>{html.escape(s)}</p>" for s in summary]
    for heading, png, rows, csv_name in sections:
        parts.append(f"<h2>{html.escape(heading)}</h2>")
        if png:
            parts.append(f"<img src='{html.escape(png)}' alt='{html.escape(heading)}'>")
        parts.append(_table(rows))
        parts.append(f"<p><a href='{html.escape(csv_name)}'>{html.escape(csv_name)}</a></p>")
    parts.append("</body></html>\n")
    return fileio.write_atomic(out / "index.html", "".join(parts), what="season page")
