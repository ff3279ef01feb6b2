"""Batch files of orbit inputs (JSON lines or CSV), read the same way by the CLI and the API.

A row that cannot be read as an orbit becomes a :class:`BatchRow` with an ``error`` naming its
line (or, through the API, its index) and the rest of the batch goes on: a row with a huge
integer, deep nesting, a lone surrogate in a string or an impossible value does not abort the
batch. JSON lines are split on ``\n`` only (a raw U+2028 or form feed inside a JSON string is
part of that string, not a line break), so line numbers match what an editor shows.
"""

import csv
import io
import json
from dataclasses import dataclass
from pathlib import Path

from dynamics.errors import InvalidOrbit
from dynamics.orbit_input import MEAN_ANOMALY_KEYS, ORBIT_KEYS

#: Columns of a CSV batch: the orbit JSON's keys (README, "The orbit input"); ``nongrav.a1`` etc.
#: for the optional non-gravitational parameters (``nongrav.dt`` in days). Covariances and
#: alternative solutions need the JSON-lines form.
_NONGRAV_COLUMNS = ("nongrav.a1", "nongrav.a2", "nongrav.a3", "nongrav.dt")
#: ``m1`` and ``k1``, the total magnitude that sets the dust production, are optional columns;
#: so are ``a``, ``mean_anomaly`` and ``n``, which place a bound orbit in a row that leaves
#: ``q`` and ``tp`` empty (:data:`dynamics.orbit_input.MEAN_ANOMALY_KEYS`).
CSV_COLUMNS = (
    *ORBIT_KEYS[: ORBIT_KEYS.index("nongrav")],
    *_NONGRAV_COLUMNS,
    "m1",
    "k1",
    *MEAN_ANOMALY_KEYS,
)
_CSV_NUMBERS = ("q", "e", "i", "node", "peri", *_NONGRAV_COLUMNS, "m1", "k1", *MEAN_ANOMALY_KEYS)


@dataclass(frozen=True)
class BatchRow:
    """One row of a batch file: its line number and either an orbit or why it is unreadable."""

    line: int
    orbit: object | None  # dynamics.orbit_input.OrbitInput
    name: str | None
    error: dict | None


def row_from_mapping(line: int, data) -> BatchRow:
    from dynamics.orbit_input import parse_orbit

    name = data.get("name") if isinstance(data, dict) else None
    name = _printable(name) if isinstance(name, str) else None
    try:
        return BatchRow(line, parse_orbit(data), name, None)
    except InvalidOrbit as exc:
        return BatchRow(line, None, name, {"field": exc.field, "message": str(exc)})


def _printable(name: str) -> str:
    """A row's name as it may be shown and written: lone surrogates become U+FFFD (they cannot
    be written as UTF-8; the orbit itself is refused by ``parse_orbit``)."""
    return name.encode("utf-8", "replace").decode("utf-8")


def _csv_value(key: str, text: str):
    text = text.strip()
    if text == "":
        return None
    if key in _CSV_NUMBERS:
        try:
            return float(text)
        except ValueError:
            return text  # parse_orbit names the field
    if key in ("epoch", "tp"):
        try:
            return float(text)  # a Julian date (TDB)
        except ValueError:
            return text  # ISO 8601 with a scale
    return text


def read_batch(path: Path) -> list[BatchRow]:
    """Rows of a ``.csv`` file (header: :data:`CSV_COLUMNS`) or of a JSON-lines file (any other
    name: one orbit object per line; blank lines and lines starting with ``#`` are skipped).

    Raises
    ------
    OSError
        The file cannot be read. A CSV file whose header has an unknown column raises
        :class:`~dynamics.errors.InvalidOrbit` naming it (nothing in such a file can be read).
    """
    path = Path(path)
    text = path.read_text(encoding="utf-8-sig")
    rows: list[BatchRow] = []
    if path.suffix.lower() == ".csv":
        reader = csv.DictReader(io.StringIO(text))
        unknown = [c for c in reader.fieldnames or () if c not in CSV_COLUMNS]
        if unknown:
            raise InvalidOrbit(
                unknown[0], f"unknown CSV column; expected some of {', '.join(CSV_COLUMNS)}"
            )
        for rec in reader:
            line = reader.line_num
            data: dict = {}
            for key, value in rec.items():
                if key is None:  # more cells than columns
                    data["_extra"] = value
                    continue
                v = _csv_value(key, value or "")
                if v is None:
                    continue
                if key.startswith("nongrav."):
                    data.setdefault("nongrav", {})[key.split(".", 1)[1]] = v
                else:
                    data[key] = v
            if "_extra" in data:
                rows.append(
                    BatchRow(
                        line,
                        None,
                        data.get("name"),
                        {"field": "row", "message": "more cells than columns"},
                    )
                )
                continue
            rows.append(row_from_mapping(line, data))
        return rows
    # Lines end at "\n" only: str.splitlines() would also split at U+2028, form feeds and the
    # like, which JSON allows raw inside strings, and shift every later line number.
    for line, raw in enumerate(text.split("\n"), start=1):
        raw = raw.removesuffix("\r")
        if not raw.strip() or raw.lstrip().startswith("#"):
            continue
        try:
            data = json.loads(raw)
        except json.JSONDecodeError as exc:
            rows.append(
                BatchRow(
                    line, None, None, {"field": "line", "message": f"not valid JSON ({exc.msg})"}
                )
            )
            continue
        except RecursionError:
            rows.append(
                BatchRow(line, None, None, {"field": "line", "message": "nested too deeply"})
            )
            continue
        rows.append(row_from_mapping(line, data))
    return rows
