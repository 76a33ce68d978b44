"""The station: what the config asks of the logger, and the sources and services it runs."""
