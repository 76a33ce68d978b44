"""Which receiver source a station config asks for (``[receiver] kind``): a USB dongle
(``rtlsdr``), a dongle served over the network (``rtltcp``), a recording replayed at full
speed (``recording``) or the simulated sky (``simulated``).

The choice lives here, above both the receiver and the simulator, so neither has to
import the other.
"""

from __future__ import annotations

import os
from pathlib import Path

from rxlog.errors import RxlogError
from rxlog.receive.devices import RtlSdrSource
from rxlog.receive.recordings import open_recording
from rxlog.receive.rtltcp import RtlTcpSource
from rxlog.sim.iq import SimulatedReceiver


def open_source(cfg, **kwargs):
    """The source ``cfg['receiver']['kind']`` names, not yet opened.

    ``simulated`` builds ``rxlog.sim.iq.SimulatedReceiver(cfg, **kwargs)``; the others
    take their settings from ``[receiver]`` (kwargs go to their constructors: tests pass
    clocks and device factories this way).
    """
    rx = cfg["receiver"]
    kind = rx["kind"]
    if kind == "simulated":
        return SimulatedReceiver(cfg, **kwargs)
    if kind == "rtlsdr":
        return RtlSdrSource.from_config(cfg, **kwargs)
    if kind == "rtltcp":
        return RtlTcpSource.from_config(cfg, **kwargs)
    if kind == "recording":
        return open_recording(rx["recording_path"] and _config_relative(cfg, rx["recording_path"]),
                              fmt=rx["recording_format"], rate_hz=rx["sample_rate_hz"],
                              center_hz=rx["recording_center_hz"],
                              start=rx["recording_start_utc"] or None)
    raise RxlogError(f"[receiver] kind: unknown receiver kind {kind!r}")


def _config_relative(cfg, p: str) -> Path:
    """A path from the config, relative to the config file's folder unless absolute."""
    path = Path(os.path.expanduser(p))
    base = getattr(cfg, "path", None)
    return path if path.is_absolute() or base is None else Path(base).parent / path
