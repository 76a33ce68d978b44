"""The simulated sky and station: what a decametric station receives, as spectra or IQ
samples, with the list of everything that was put there (the truth).

- the background: ``ionosphere`` (foF2, D-layer absorption), ``antenna`` (dipole beam,
  flux to kelvin, band-pass, receiver noise), ``galaxy`` (the Galactic sky as it turns);
- what stands out of it: ``events`` (the base of every event, its class, interference
  kind and episode), ``sources`` (solar bursts, fadeouts, Jovian storms),
  ``interference`` (each kind of interference: man-made noise, transmitters, sweeps,
  impulses, switched noise, spurs) and ``interference_plan`` (a day of it per category);
- ``model``: ``SkyModel``, all of the above for one station and one span of time;
- drawing: ``render`` (a model on any grid), ``cells`` (the archive grid and the levels
  of injected events on it);
- outputs: ``spectra`` (dynamic spectra), ``iq`` (IQ samples, ``SimulatedReceiver``),
  ``truth`` (truth rows and CSV, the interference share), ``write`` (files, as
  ``rxlog simulate`` writes them), ``season`` (a season written day by day: storms
  planned over the whole span, solar activity varying from day to day).
"""
