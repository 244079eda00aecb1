"""barwright: design, tune, hear and measure tuned metal-bar keyboard percussion."""

__version__ = "0.1.0"
