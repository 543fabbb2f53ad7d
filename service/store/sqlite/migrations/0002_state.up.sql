-- Tracked estimator state (one row per battery, written by compare-and-swap on
-- version) and the compact health history.

CREATE TABLE battery_states (
    tenant              TEXT    NOT NULL,
    battery_id          TEXT    NOT NULL,
    estimator           BLOB    NOT NULL, -- opaque JSON of the estimator
    soc                 REAL    NOT NULL,
    soc_sigma           REAL    NOT NULL,
    capacity_factor     REAL    NOT NULL,
    resistance_factor   REAL    NOT NULL,
    equivalent_cycles   REAL    NOT NULL,
    temperature_celsius REAL    NOT NULL,
    voltage_volts       REAL    NOT NULL,
    current_amps        REAL    NOT NULL, -- positive = discharge
    -- The watermark: the last sample folded into estimator. Written in the same row
    -- as the estimator, so the two never disagree.
    last_sequence       INTEGER NOT NULL CHECK (last_sequence >= 0),
    last_sample_time    INTEGER,
    update_time         INTEGER NOT NULL,
    version             INTEGER NOT NULL,
    PRIMARY KEY (tenant, battery_id),
    FOREIGN KEY (tenant, battery_id) REFERENCES batteries (tenant, id) ON DELETE CASCADE
) STRICT;

CREATE TABLE health_records (
    tenant            TEXT    NOT NULL,
    battery_id        TEXT    NOT NULL,
    time              INTEGER NOT NULL,
    capacity_factor   REAL    NOT NULL,
    resistance_factor REAL    NOT NULL,
    soc               REAL    NOT NULL,
    equivalent_cycles REAL    NOT NULL,
    PRIMARY KEY (tenant, battery_id, time),
    FOREIGN KEY (tenant, battery_id) REFERENCES batteries (tenant, id) ON DELETE CASCADE
) STRICT, WITHOUT ROWID;

CREATE TRIGGER battery_states_version_insert AFTER INSERT ON battery_states
BEGIN
    UPDATE store_versions SET value = NEW.version WHERE id = 1 AND value < NEW.version;
END;
CREATE TRIGGER battery_states_version_update AFTER UPDATE OF version ON battery_states
BEGIN
    UPDATE store_versions SET value = NEW.version WHERE id = 1 AND value < NEW.version;
END;
