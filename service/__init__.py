"""trailcast's web service and command-line interface: thin layers over :mod:`dynamics`."""

from dynamics import __version__

__all__ = ["__version__"]
