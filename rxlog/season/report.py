"""``season_report``: what ``rxlog season`` runs -- the store's events, episodes, quality
and health rows over a range, turned into exposure-normalised statistics, plots, CSV
tables and a season page."""

from __future__ import annotations

from pathlib import Path

from rxlog import fileio
from rxlog.detect.settings import Settings
from rxlog.errors import RxlogError
from rxlog.exchange.importer import read_event_list
from rxlog.season import page, plots
from rxlog.season.exposure import season_timeline
from rxlog.season.health import masked_by_hour, uptime_calendar
from rxlog.season.occurrence import (
    confirmed_spans,
    jovian_spans,
    occurrence_map,
    region_rates,
)
from rxlog.season.solar import fadeouts_per_month, solar_by_altitude, solar_daily
from rxlog.sky.regions import regions_from_config
from rxlog.store import EventStore
from rxlog.timeutil import iso


def load_season(cfg, t0: float, t1: float) -> dict:
    """The station's events, episodes, quality and health rows in [t0, t1) from its store;
    RxlogError when the range holds no data at all."""
    station = cfg["station"]["name"]
    if not t1 > t0:
        raise RxlogError(f"--end ({iso(t1)}) must be after --start ({iso(t0)})")
    store = EventStore(cfg.store_path)
    try:
        rows = {"events": store.events(t0, t1, station=station),
                "episodes": [e for e in store.episodes(t0, t1) if e["station"] == station],
                "quality": [q for q in store.quality(t0, t1) if q["station"] == station and q["hour_utc"] >= iso(t0 - 3599)],
                "health": [h for h in store.health(t0, t1) if h["station"] == station]}
    finally:
        store.close()
    if not any(float(q.get("covered_s") or 0.0) > 0 for q in rows["quality"]) and not rows["events"]:
        raise RxlogError(f"no data for station {station} between {iso(t0)} and {iso(t1)} in {cfg.store_path}; "
                         "run rxlog reprocess (or rxlog detect) over that range first")
    return rows


def season_report(cfg, t0: float, t1: float, out, partners=()) -> dict:
    """Write the season's plots (PNG), tables (CSV) and page (index.html) into ``out``.

    ``partners``: event-list files of other stations (CSV, JSON, VOTable); with them the
    network's occurrence map counts Jovian emission confirmed at two or more stations.
    Altitude limits are the detector's ``[detector] jupiter_up_deg`` and ``sun_up_deg``.
    Returns the paths written and the headline numbers.
    """
    out = Path(out)
    partner_lists = [read_event_list(p) for p in partners]     # bad files fail before anything is written
    rows = load_season(cfg, t0, t1)
    s = Settings.from_config(cfg)
    regions = regions_from_config(cfg)
    tl = season_timeline(cfg, t0, t1, rows["quality"])
    spans = jovian_spans(rows["events"], rows["episodes"])
    omap = occurrence_map(tl, spans, s.jupiter_up_deg)
    rates = region_rates(tl, spans, [r.name for r in regions], s.jupiter_up_deg)
    daily = solar_daily(tl, rows["events"], s.sun_up_deg)
    by_alt = solar_by_altitude(tl, rows["events"], s.sun_up_deg)
    monthly = fadeouts_per_month(daily)
    calendar = uptime_calendar(t0, t1, rows["quality"], rows["health"])
    masked = masked_by_hour(rows["quality"])
    fileio.ensure_dir(out)
    station = cfg["station"]["name"]
    span_text = f"{iso(t0)[:10]} to {iso(t1)[:10]}"
    written = {
        "occurrence_png": plots.occurrence_plot(omap, regions, out / "occurrence.png",
                                                f"{station}: Jovian occurrence, {span_text}"),
        "solar_png": plots.solar_plot(daily, by_alt, monthly, out / "solar.png"),
        "uptime_png": plots.uptime_plot(calendar, out / "uptime.png"),
        "masked_png": plots.masked_plot(masked, out / "masked.png"),
    }
    map_rows = page.map_rows(omap)
    tables = {"occurrence.csv": map_rows, "regions.csv": rates, "solar_daily.csv": daily,
              "solar_altitude.csv": by_alt, "fadeouts_monthly.csv": monthly, "uptime.csv": calendar,
              "masked_by_hour.csv": masked}
    sections = [("Jovian occurrence over CML III and Io phase", "occurrence.png", map_rows, "occurrence.csv"),
                ("Occurrence per source region (Wilson 95 % intervals)", None, rates, "regions.csv")]
    network = None
    if partner_lists:
        lists = {station: rows["events"], **{pl.name: pl.events for pl in partner_lists}}
        confirmed = confirmed_spans(lists)
        nmap = occurrence_map(tl, confirmed, s.jupiter_up_deg)
        network = {"stations": len(lists), "confirmed_spans": len(confirmed)}
        written["network_png"] = plots.occurrence_plot(
            nmap, regions, out / "network.png",
            f"Network ({len(lists)} stations): emission confirmed at 2 or more, per {station}'s exposure")
        tables["network.csv"] = page.map_rows(nmap)
        sections.append(("Network occurrence: Jovian emission confirmed at two or more stations",
                         "network.png", tables["network.csv"], "network.csv"))
    sections += [("Solar bursts per day, against the Sun's altitude, fadeouts per month", "solar.png", daily,
                  "solar_daily.csv"),
                 ("Burst rates against the Sun's altitude", None, by_alt, "solar_altitude.csv"),
                 ("Fadeouts per month", None, monthly, "fadeouts_monthly.csv"),
                 ("Uptime calendar", "uptime.png", calendar, "uptime.csv"),
                 ("Masked fraction by hour of day", "masked.png", masked, "masked_by_hour.csv")]
    for name, table in tables.items():
        written[name] = page.write_csv(out / name, table)
    exposure_h = float(omap.exposure_s.sum() / 3600.0)
    emission_h = float(omap.emission_s.sum() / 3600.0)
    summary = [f"Station {station}, {span_text} (UTC).",
               f"Listened {float((tl.listening * tl.step_s).sum()) / 3600.0:.1f} h with the band unmasked; "
               f"{exposure_h:.1f} h of it with Jupiter above {s.jupiter_up_deg:g} deg, of which {emission_h:.2f} h "
               "with Jovian emission.",
               f"{len(rows['events'])} events, {len(rows['episodes'])} episodes."]
    if network:
        summary.append(f"Network: {network['stations']} stations, {network['confirmed_spans']} spans of Jovian "
                       "emission confirmed at two or more.")
    written["index_html"] = page.write_page(out, f"Season {span_text}: {station}", summary, sections)
    return {"paths": written, "exposure_h": exposure_h, "emission_h": emission_h, "events": len(rows["events"]),
            "regions": rates, "network": network}
