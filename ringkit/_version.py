"""Single source of the ringkit version string."""

__version__ = "0.1.0"
