"""Screening jobs: geometry for every orbit of a batch, small trail forecasts for candidates.

Each orbit's result is stored under its own content key (``screening_orbit_results``) as soon as
it is final, so a job re-queued after an interruption, or another job holding the same orbit,
skips it. The job's result is the summary and every orbit in input order (``index``).
"""

import json

from ..batch import row_from_mapping
from ..jobs import Job, format_wall_utc, utc_now
from ..screening_report import assemble
from . import JobKind


def canonical_screening_request(
    orbits: list, first_year: int, last_year: int, rule: dict, options: dict
) -> dict:
    """What a screening job's id hashes: the orbits as given, years, rule, options, version."""
    from dynamics import __version__

    return {
        "orbits": orbits,
        "years": [int(first_year), int(last_year)],
        "rule": rule,
        "options": options,
        "model_version": __version__,
    }


def screening_inputs(request: dict):
    """(rows, rule, options) a screening job's canonical request describes."""
    from dynamics.screening import ScreeningRule

    from ..options import screening_options

    rows = [row_from_mapping(k, item) for k, item in enumerate(request["orbits"])]
    rule = ScreeningRule(**request["rule"])
    options = screening_options(request["years"][0], request["years"][1], request["options"])
    return rows, rule, options


class OrbitResults:
    """Per-orbit results by content key, in the job database."""

    def __init__(self, store):
        self.store = store

    def lookup(self, key: str) -> dict | None:
        rows = self.store.query(
            "SELECT result_json FROM screening_orbit_results WHERE key = ?", (key,)
        )
        return json.loads(rows[0]["result_json"]) if rows else None

    def save(self, key: str, record: dict) -> None:
        with self.store.transaction() as conn:
            conn.execute(
                "INSERT OR REPLACE INTO screening_orbit_results (key, result_json, stored_utc) "
                "VALUES (?, ?, ?)",
                (key, json.dumps(record, allow_nan=False), format_wall_utc(utc_now())),
            )


def run(job: Job, ctx) -> dict:
    """Screen the job's batch; progress counts finished orbits (stored ones count at once)."""
    from dynamics.screening import screen_batch

    def progress(done: int, total: int, stage: str) -> None:
        ctx.progress(done / total if total else 0.0, stage, items_done=done)

    rows, rule, options = screening_inputs(job.request)
    results = OrbitResults(ctx.store)
    run_ = screen_batch(
        [r.orbit for r in rows if r.orbit is not None],
        rule,
        options,
        executor=ctx.executor,
        lookup=results.lookup,
        save=results.save,
        progress=progress,
        should_stop=ctx.should_stop,
    )
    result = assemble(rows, run_, rule, options, source=f"POST /v1/screenings ({job.id})")
    for r in result["orbits"]:
        r["index"] = r.pop("line")  # an API batch has item indices, not file lines
    return result


KIND = JobKind("screening", run, None, failure_title="Screening failed")
