"""probelog: the measurement core (plans, checks, line metrics, calibration,
journal, session engine, export). No UI and no instrument I/O live here."""

__version__ = "0.1.0"
