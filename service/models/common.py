"""What every request model shares: no NaN/Infinity, no unknown keys, years, server limits."""

from typing import Annotated, Any, Literal

from pydantic import AfterValidator, BaseModel, ConfigDict, Field

#: Calendar years the planets are known for: the DE423 ephemeris (Folkner 2010) spans
#: 1799-12-16 to 2200-02-01, so whole years 1800-2199.
FIRST_YEAR, LAST_YEAR = 1800, 2199


def _in_de423_years(year: int) -> int:
    if not FIRST_YEAR <= year <= LAST_YEAR:
        raise ValueError(f"{year} lies outside {FIRST_YEAR}-{LAST_YEAR} (the DE423 ephemeris span)")
    return year


Year = Annotated[
    int,
    AfterValidator(_in_de423_years),
    Field(
        json_schema_extra={"minimum": FIRST_YEAR, "maximum": LAST_YEAR},
        description="Calendar year (UTC); 1800-2199, the whole years inside the DE423 "
        "ephemeris span (Folkner 2010)",
    ),
]


class LimitExceeded(ValueError):
    """A request asks for more than this server allows (a setting, not physics): 422."""

    def __init__(self, field: str, detail: str):
        self.field = field
        super().__init__(detail)


class RequestModel(BaseModel):
    """Base of every request body: unknown keys refused, NaN and Infinity refused."""

    model_config = ConfigDict(extra="forbid", allow_inf_nan=False)


def check_years(years: list[int], max_years: int | None = None) -> tuple[int, int]:
    """(first, last) of ``[first, last]`` or ``[year]``; ValueError when they are reversed,
    :class:`LimitExceeded` when they span more than ``max_years``."""
    first, last = years[0], years[-1]
    if last < first:
        raise ValueError(f"years: last ({last}) precedes first ({first})")
    if max_years is not None and last - first + 1 > max_years:
        raise LimitExceeded(
            "years",
            f"{last - first + 1} years asked; this server takes at most {max_years} per job",
        )
    return first, last


def option_field(option, surface: str = "forecast", annotation: Any = None) -> tuple[Any, Any]:
    """``(annotation, Field)`` of one row of :data:`service.options.OPTIONS`: its type (or
    ``annotation``), choices, limits, its default on ``surface`` and its help."""
    default = option.default_for(surface)
    if annotation is None:
        annotation = Literal[option.choices] if option.choices else option.type
        if option.nullable:
            annotation = annotation | None
    limits = {
        k: getattr(option, k) for k in ("ge", "gt", "le", "lt") if getattr(option, k) is not None
    }
    if option.max_items is not None:
        limits.update(min_length=1, max_length=option.max_items)
    described = option.help[0].upper() + option.help[1:]
    return annotation, Field(
        default, description=f"{described} (default {option.default_text(surface)})", **limits
    )
