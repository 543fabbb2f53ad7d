-- Calibration runs: fitting a battery type to submitted lab data, a long-running job.

CREATE TABLE calibrations (
    tenant       text        NOT NULL,
    id           text        NOT NULL,
    display_name text        NOT NULL,
    status       text        NOT NULL
        CHECK (status IN ('pending', 'running', 'succeeded', 'failed', 'cancelled')),
    input        json,       -- opaque JSON of the submitted request
    report       json,       -- opaque JSON of the fit report
    type_name    text        NOT NULL,
    error        text        NOT NULL,
    request_id   text,
    create_time  timestamptz NOT NULL,
    update_time  timestamptz NOT NULL,
    version      bigint      NOT NULL,
    PRIMARY KEY (tenant, id)
);
CREATE UNIQUE INDEX calibrations_request ON calibrations (tenant, request_id);
-- Lists go newest first.
CREATE INDEX calibrations_newest ON calibrations (tenant, create_time DESC, id DESC);
