"""The sky over the station: ephemeris tags for arrays of times.

Everything here takes an array of POSIX seconds (UTC) and returns arrays of the same
shape. Positions come from ERFA, the C library under astropy: ``epv00`` for the Earth
and the Sun (the SOFA/ERFA Earth ephemeris, VSOP87-based) and ``plan94`` for Jupiter
(Simon et al. 1994, A&A 282, 663) -- astropy's ``builtin`` ephemeris, which needs no
download. Earth orientation (UT1-UTC) and leap seconds come from the tables bundled
with astropy (package ``astropy-iers-data``); nothing is ever fetched.

- ``timescales``: UTC to TAI, TT and UT1 from the bundled IERS tables;
- ``jupiter``: light time, System III CML, Io phase, DE;
- ``positions``: the geocentric quantities on a grid of nodes, alt/az of Jupiter and
  the Sun at a site, optical refraction;
- ``regions``: the Io source regions, their boxes and the checks of a box table;
- ``tags``: all of the above for many times (``compute_tags``, ``station_tags``,
  ``tag_table``) and the intervals a body is up (``body_up_intervals``);
- ``forecast``: the watches ahead (Jupiter up, the Sun low, CML / Io phase in a region),
  as text, an iCalendar file and a plot.
"""
