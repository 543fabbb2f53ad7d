-- Calibration runs: fitting a battery type to submitted lab data, a long-running job.

CREATE TABLE calibrations (
    tenant       TEXT    NOT NULL,
    id           TEXT    NOT NULL,
    display_name TEXT    NOT NULL,
    status       TEXT    NOT NULL
        CHECK (status IN ('pending', 'running', 'succeeded', 'failed', 'cancelled')),
    input        BLOB,   -- opaque JSON of the submitted request
    report       BLOB,   -- opaque JSON of the fit report
    type_name    TEXT    NOT NULL,
    error        TEXT    NOT NULL,
    request_id   TEXT,
    create_time  INTEGER NOT NULL,
    update_time  INTEGER NOT NULL,
    version      INTEGER NOT NULL,
    PRIMARY KEY (tenant, id)
) STRICT;
CREATE UNIQUE INDEX calibrations_request ON calibrations (tenant, request_id);
-- Lists go newest first.
CREATE INDEX calibrations_newest ON calibrations (tenant, create_time DESC, id DESC);

CREATE TRIGGER calibrations_version_insert AFTER INSERT ON calibrations
BEGIN
    UPDATE store_versions SET value = NEW.version WHERE id = 1 AND value < NEW.version;
END;
CREATE TRIGGER calibrations_version_update AFTER UPDATE OF version ON calibrations
BEGIN
    UPDATE store_versions SET value = NEW.version WHERE id = 1 AND value < NEW.version;
END;
