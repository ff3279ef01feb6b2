-- trailcast schema, version 4: one job table for every kind of job (forecast, screening, ...).
-- Forecast and screening jobs used to live in two tables with the same life cycle; they move
-- here unchanged (ids, states, requests, timings, attempts, errors and results are copied, so
-- every stored job stays readable). `kind` says which module runs the job and stores its result
-- (service/job_kinds/). Progress is one fraction and one stage for every kind, plus an item count
-- for kinds that work through items (a screening's orbits).
-- With foreign keys on, dropping a parent table deletes its children first: the children are
-- copied and dropped before their parents, so nothing is lost on the way.
CREATE TABLE jobs (
    id                 TEXT PRIMARY KEY,
    kind               TEXT NOT NULL,            -- forecast | screening
    state              TEXT NOT NULL
                       CHECK (state IN ('queued', 'running', 'done', 'failed', 'cancelled')),
    request_json       TEXT NOT NULL,            -- canonical inputs (what the id hashes)
    label              TEXT NOT NULL,            -- parent name, or what a batch holds
    series_key         TEXT,                     -- forecasts: label + options (listing dedup)
    first_year         INTEGER NOT NULL,
    last_year          INTEGER NOT NULL,
    model_version      TEXT NOT NULL,
    progress_fraction  REAL NOT NULL DEFAULT 0.0,
    progress_stage     TEXT NOT NULL DEFAULT 'queued',
    items_done         INTEGER,                  -- NULL for kinds without items
    items_total        INTEGER,
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
CREATE INDEX jobs_by_state ON jobs (state, queued_utc);
CREATE INDEX jobs_by_finish ON jobs (state, finished_utc);
CREATE INDEX jobs_by_series ON jobs (series_key, first_year, last_year);

CREATE TABLE job_results (
    job_id       TEXT PRIMARY KEY REFERENCES jobs (id) ON DELETE CASCADE,
    result_json  TEXT NOT NULL,
    stored_utc   TEXT NOT NULL
);

INSERT INTO jobs (id, kind, state, request_json, label, series_key, first_year, last_year,
                  model_version, progress_fraction, progress_stage, items_done, items_total,
                  created_utc, queued_utc, started_utc, finished_utc, heartbeat_utc, runner,
                  attempts, cancel_requested, error_json)
SELECT id, 'forecast', state, request_json, parent_name,
       parent_name || char(31) || json_extract(request_json, '$.options'),
       first_year, last_year, model_version, progress_fraction, progress_stage, NULL, NULL,
       created_utc, queued_utc, started_utc, finished_utc, heartbeat_utc, runner, attempts,
       cancel_requested, error_json
FROM forecast_jobs;

INSERT INTO jobs (id, kind, state, request_json, label, series_key, first_year, last_year,
                  model_version, progress_fraction, progress_stage, items_done, items_total,
                  created_utc, queued_utc, started_utc, finished_utc, heartbeat_utc, runner,
                  attempts, cancel_requested, error_json)
SELECT id, 'screening', state, request_json, 'batch of ' || orbits_total || ' orbits', NULL,
       first_year, last_year, model_version,
       CASE WHEN orbits_total > 0 THEN MIN(1.0, orbits_done * 1.0 / orbits_total) ELSE 0.0 END,
       progress_stage, orbits_done, orbits_total,
       created_utc, queued_utc, started_utc, finished_utc, heartbeat_utc, runner, attempts,
       cancel_requested, error_json
FROM screening_jobs;

INSERT INTO job_results (job_id, result_json, stored_utc)
SELECT job_id, result_json, stored_utc FROM forecast_results;
INSERT INTO job_results (job_id, result_json, stored_utc)
SELECT job_id, result_json, stored_utc FROM screening_job_results;

-- The encounters index now points at `jobs`, and knows its encounter's year (for the listing's
-- "latest forecast per parent and options" rule).
CREATE TABLE encounters (
    job_id          TEXT NOT NULL REFERENCES jobs (id) ON DELETE CASCADE,
    idx             INTEGER NOT NULL,
    parent_name     TEXT NOT NULL,
    year            INTEGER NOT NULL,
    peak_utc        TEXT NOT NULL,
    zhr             REAL,                        -- NULL while encounters carry no zhr
    encounter_json  TEXT NOT NULL,
    PRIMARY KEY (job_id, idx)
);
CREATE INDEX encounters_by_peak ON encounters (peak_utc, job_id, idx);
INSERT INTO encounters (job_id, idx, parent_name, year, peak_utc, zhr, encounter_json)
SELECT job_id, idx, parent_name,
       COALESCE(json_extract(encounter_json, '$.year'), CAST(substr(peak_utc, 1, 4) AS INTEGER)),
       peak_utc, zhr, encounter_json
FROM forecast_encounters;

DROP TABLE forecast_encounters;
DROP TABLE forecast_results;
DROP TABLE screening_job_results;
DROP TABLE forecast_jobs;
DROP TABLE screening_jobs;
