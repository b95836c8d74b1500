"""zonedesign: design, redraw and audit nested statistical-geography zones."""

__version__ = "0.1.0"
