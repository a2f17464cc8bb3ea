"""The library version, in one place: the package, the report and the study fingerprints read it."""

__version__ = "0.1.0"
