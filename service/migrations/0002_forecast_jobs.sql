-- trailcast schema, version 2: forecast jobs, their results and the encounters index.
-- A job's id is the hash of its canonical inputs and the model version (service/jobs.py), so an
-- identical submission finds its job again. A result, its encounter rows and the job's move to
-- 'done' are written in one transaction: a reader sees all of them or none.
CREATE TABLE forecast_jobs (
    id                 TEXT PRIMARY KEY,
    state              TEXT NOT NULL
                       CHECK (state IN ('queued', 'running', 'done', 'failed', 'cancelled')),
    request_json       TEXT NOT NULL,            -- canonical inputs (what the id hashes)
    parent_name        TEXT NOT NULL,
    first_year         INTEGER NOT NULL,
    last_year          INTEGER NOT NULL,
    model_version      TEXT NOT NULL,
    progress_fraction  REAL NOT NULL DEFAULT 0.0,
    progress_stage     TEXT NOT NULL DEFAULT 'queued',
    created_utc        TEXT NOT NULL,            -- ISO 8601 UTC with Z, like every *_utc column
    queued_utc         TEXT NOT NULL,            -- last time it entered the queue
    started_utc        TEXT,
    finished_utc       TEXT,
    heartbeat_utc      TEXT,                     -- last sign of life of the runner holding it
    runner             TEXT,                     -- host:pid:token of the runner holding it
    attempts           INTEGER NOT NULL DEFAULT 0,
    cancel_requested   INTEGER NOT NULL DEFAULT 0,
    error_json         TEXT
);
CREATE INDEX forecast_jobs_by_state ON forecast_jobs (state, queued_utc);

CREATE TABLE forecast_results (
    job_id       TEXT PRIMARY KEY REFERENCES forecast_jobs (id) ON DELETE CASCADE,
    result_json  TEXT NOT NULL,
    stored_utc   TEXT NOT NULL
);

-- One row per predicted encounter (not near misses) of every finished forecast, for
-- GET /v1/encounters. encounter_json is the encounter object exactly as the forecast gave it.
CREATE TABLE forecast_encounters (
    job_id          TEXT NOT NULL REFERENCES forecast_jobs (id) ON DELETE CASCADE,
    idx             INTEGER NOT NULL,
    parent_name     TEXT NOT NULL,
    peak_utc        TEXT NOT NULL,
    zhr             REAL,                        -- NULL while encounters carry no zhr
    encounter_json  TEXT NOT NULL,
    PRIMARY KEY (job_id, idx)
);
CREATE INDEX forecast_encounters_by_peak ON forecast_encounters (peak_utc, job_id, idx);
