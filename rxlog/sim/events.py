"""What the simulated sky holds besides its background: events, each of one class of the
event store's vocabulary, with its extent for the truth table and a way to draw itself
on any grid of times and frequencies. Solar and Jovian sources are in ``sources``,
interference in ``interference``.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

EVENT_CLASSES = ("jovian_l", "jovian_s", "solar_iii", "solar_ii", "solar_iv", "fadeout", "rfi")
# What a reviewer sees as one story: a storm, a group of Type III bursts, a Type II, a
# Type IV continuum, a fadeout, or one burst on its own. Episodes of one flare share a
# sequence.
EPISODE_KINDS = ("jovian_storm", "type_iii_group", "type_ii", "type_iv", "fadeout", "isolated_burst")
# Interference by how it looks in a dynamic spectrum: one broadband impulse, a train or
# bunch of them (a multiple-stroke sferic, a fence, arcing), a narrowband transmission
# that comes and goes (voice, data), a step of broadband noise (an appliance switched
# on), a swept transmitter, a steady or scheduled carrier, a spur of the station itself.
RFI_KINDS = ("impulse", "impulse_train", "narrowband_burst", "switched_broadband", "sweep", "carrier", "spur")
DAY_S = 86400.0             # events are planned per UTC day


@dataclass
class Event:
    """One injected phenomenon. ``shape`` draws it (K, before propagation) on a grid."""
    cls: str
    t_start: float
    t_end: float
    f_lo: float
    f_hi: float
    drift_mhz_s: float = float("nan")
    path: str = "sky"           # 'sky' (through the ionosphere), 'local' (antenna), 'rx' (after the filter)
    source: str = "sun"         # 'sun', 'jupiter', 'skywave' (distant transmitter), 'local'
    reason: str = ""
    region: str = ""
    rfi_kind: str = ""          # interference: one of RFI_KINDS
    episode: str = ""           # sky events: the true episode they belong to (an id) ...
    episode_kind: str = ""      # ... its kind (EPISODE_KINDS) ...
    sequence: str = ""          # ... and the flare sequence it is part of ("" when none)
    scale: float = 1.0
    # area actually drawn (wider than the truth extent)
    r_t0: float = 0.0
    r_t1: float = 0.0
    r_f0: float = 0.0
    r_f1: float = 0.0
    params: dict = field(default_factory=dict)

    def __post_init__(self):
        if not self.r_t1:
            self.r_t0, self.r_t1, self.r_f0, self.r_f1 = self.t_start, self.t_end, self.f_lo, self.f_hi

    def shape(self, t, f, dwell, df):
        """Excess antenna temperature (K) on a grid of times ``t`` and frequencies ``f``
        (broadcastable arrays), for cells integrating ``dwell`` s over bins ``df`` Hz wide."""
        raise NotImplementedError


@dataclass(frozen=True)
class Site:
    """What planning needs of the station: its band (Hz) and its place (deg)."""
    fmin: float
    fmax: float
    lat: float
    lon: float


def random_times(rng, t_day: float, n: int) -> np.ndarray:
    """``n`` times uniformly spread over the UTC day starting at ``t_day``."""
    return t_day + rng.uniform(0, DAY_S, n)

