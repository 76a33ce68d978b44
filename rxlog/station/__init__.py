"""rxlog's station stage: the station -- its config, and the logger behind ``rxlog run``.

The config is read here, once; the stages below take the values they use. One module
per concern:

- ``config``: the station's TOML, validated against one schema (``load_config``)
- ``sources``: which receiver source the config asks for (device, rtl_tcp, recording, simulated)
- ``feeds``: spectra from that source, through the sweep plan, or from the simulator
- ``pipeline``: the data path on the main thread: spectra -> archive -> detector -> store
- ``storewriter``: the logger's rows for the event store (events, episodes, quality, health)
- ``cutouts``: full-resolution cutouts around each new event
- ``supervise``: the ``Logger`` and ``run``: threads, watchdog, retries, restarts
- ``diskguard``: raw spectra pause while the disk is nearly full
- ``clock``: the host's two clocks and steps of one against the other
- ``health``: clock sync, CPU, disk, memory, whether a logger is running
- ``status``: what ``rxlog status`` says
- ``journal``: log lines for systemd's journal
- ``notify``: sd_notify (ready, watchdog, status)
- ``units``: systemd units and a udev rule from the config
"""
