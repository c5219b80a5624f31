"""whichsense: tells which sense of an ambiguous term each occurrence carries."""

__version__ = "0.1.0"
