-- trailcast schema, version 3: screening jobs (POST /v1/screenings) and per-orbit results.
-- A screening job's id is the hash of its canonical inputs (service/screening.py). Each orbit's
-- result is stored under its own content key (dynamics.screening.screening_key: orbit, years,
-- rule, forecast options, model version) as soon as it is final, so a job re-queued after an
-- interruption, or another job containing the same orbit, skips it. A job's summary and its move
-- to 'done' are written in one transaction.
CREATE TABLE screening_jobs (
    id                 TEXT PRIMARY KEY,
    state              TEXT NOT NULL
                       CHECK (state IN ('queued', 'running', 'done', 'failed', 'cancelled')),
    request_json       TEXT NOT NULL,            -- canonical inputs (what the id hashes)
    model_version      TEXT NOT NULL,
    first_year         INTEGER NOT NULL,
    last_year          INTEGER NOT NULL,
    orbits_total       INTEGER NOT NULL,
    orbits_done        INTEGER NOT NULL DEFAULT 0,
    progress_stage     TEXT NOT NULL DEFAULT 'queued',
    created_utc        TEXT NOT NULL,            -- ISO 8601 UTC with Z, like every *_utc column
    queued_utc         TEXT NOT NULL,
    started_utc        TEXT,
    finished_utc       TEXT,
    heartbeat_utc      TEXT,
    runner             TEXT,                     -- host:pid:token of the runner holding it
    attempts           INTEGER NOT NULL DEFAULT 0,
    cancel_requested   INTEGER NOT NULL DEFAULT 0,
    error_json         TEXT
);
CREATE INDEX screening_jobs_by_state ON screening_jobs (state, queued_utc);

CREATE TABLE screening_job_results (
    job_id       TEXT PRIMARY KEY REFERENCES screening_jobs (id) ON DELETE CASCADE,
    result_json  TEXT NOT NULL,
    stored_utc   TEXT NOT NULL
);

CREATE TABLE screening_orbit_results (
    key          TEXT PRIMARY KEY,               -- 64 hex digits: the orbit's content key
    result_json  TEXT NOT NULL,
    stored_utc   TEXT NOT NULL
);
