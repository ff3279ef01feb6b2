-- trailcast schema, version 1: provenance of the database itself.
-- Jobs and results arrive with later migrations; every migration runs in one transaction.
CREATE TABLE IF NOT EXISTS service_info (
    key   TEXT PRIMARY KEY,
    value TEXT NOT NULL
);
