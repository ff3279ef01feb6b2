"""Exceptions raised by trailcast's numerical core.

Every error is named after what went wrong physically or in the input, and its docstring says what
to do next. The service maps them to RFC 9457 problems in one handler; the CLI prints their message
on one line and exits with status 2.
"""


class TrailcastError(Exception):
    """Base class of every error trailcast raises on purpose."""


class InvalidOrbit(TrailcastError, ValueError):
    """An orbit input is missing a key or holds an impossible value.

    ``field`` names the offending key (dotted path for nested ones, e.g. ``solutions.1.e``).
    Fix that field of the orbit and try again.
    """

    def __init__(self, field: str, message: str):
        self.field = field
        self.message = message
        super().__init__(f"{field}: {message}")


class InvalidTime(TrailcastError, ValueError):
    """A time string could not be read (not ISO 8601, or no/unknown time scale).

    Write times as ISO 8601 with an explicit scale, e.g. ``1999-11-18T02:04:00Z`` (UTC) or
    ``1998-02-28T02:24:00 TDB``.
    """


class OutsideTimeSpan(TrailcastError, ValueError):
    """A time lies outside the span a model or table supports.

    ``span`` gives the supported (first, last) Julian dates or years. Pick a time inside it;
    for planetary positions outside the ephemeris, integrate the planets from inside its span.
    """

    def __init__(self, message: str, span: tuple[float, float] | None = None):
        self.span = span
        super().__init__(message)


class InvalidSite(TrailcastError, ValueError):
    """An observing site or its options hold an impossible value (latitude outside [-90, 90] deg,
    an unreadable ``LAT,LON[,ELEV_M]`` ...). ``field`` names the value at fault; fix it and retry.
    """

    def __init__(self, field: str, message: str):
        self.field = field
        self.message = message
        super().__init__(f"{field}: {message}")


class ComputationStopped(TrailcastError):
    """The caller's ``should_stop()`` answered True: the computation stopped where it was.

    Nothing went wrong with the input; whoever passed ``should_stop`` knows why it stopped (a
    cancelled job, a time limit, a shutdown) and decides what comes next.
    """
