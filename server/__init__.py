"""railsign: design sign-off for switched power rails."""

__version__ = "0.1.0"
