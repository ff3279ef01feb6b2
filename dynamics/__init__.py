"""trailcast's numerical core: time scales, frames, orbits, planetary ephemeris, dust trails.

Plain inputs and outputs (numpy arrays, dataclasses); units are part of every name (au, day, TDB
inside; UTC and J2000 solar longitude at the edges). This package never imports the web layer.
"""

__version__ = "0.1.0"
