"""The morning review: one night's report (summary, plots, a page with a card per episode,
its bursts folded inside, and per burst of no episode),
the server that saves labels from that page, and event listings for the shell.

One module per concern, lowest first:

- ``night``: nights (local noon to noon), times written with their zone, the default night
- ``palette``: one colour and name per event class, the page's class CSS
- ``data``: reading a night's spectra (overview grid, coverage, masking, zoom windows)
- ``cutouts``: events' full-resolution cutouts read back for their zooms
- ``items``: the review items: episodes with their bursts, and bursts of no episode
- ``summary``: the night's numbers and the terminal summary
- ``plots``, ``zoom``: the overview and CML III–Io-phase plots, the event zooms
- ``page``: the review page (jinja2 templates in ``templates/``, styles and script in ``static/``)
- ``report``: ``build_report``, which gathers, plots and writes a night's report folder
- ``listing``: ``list_events``, ``event_table`` and ``episode_table`` for ``rxlog events``
- ``labels``, ``connections``, ``handler``, ``server``: the labelling server (``ReviewServer``)
"""
