-- Core tables: store metadata, the version counter, battery types, batteries, labels.
-- Times are INTEGER microseconds since the Unix epoch (UTC); NULL means not set.

-- store_meta holds store-wide values, such as the page-token signing key.
CREATE TABLE store_meta (
    key   TEXT PRIMARY KEY,
    value BLOB NOT NULL
) STRICT;

-- store_versions holds the last version handed out. Writes take
-- (SELECT value + 1 FROM store_versions WHERE id = 1) as the new version, and the
-- triggers below advance the counter, so versions are never reused (the same job a
-- sequence does in PostgreSQL).
CREATE TABLE store_versions (
    id    INTEGER PRIMARY KEY CHECK (id = 1),
    value INTEGER NOT NULL
) STRICT;
INSERT INTO store_versions (id, value) VALUES (1, 0);

CREATE TABLE battery_types (
    tenant         TEXT    NOT NULL,
    name           TEXT    NOT NULL,
    display_name   TEXT    NOT NULL,
    chemistry      TEXT    NOT NULL,
    parameters     BLOB    NOT NULL,
    calibration_id TEXT    NOT NULL,
    request_id     TEXT,
    create_time    INTEGER NOT NULL,
    update_time    INTEGER NOT NULL,
    version        INTEGER NOT NULL,
    PRIMARY KEY (tenant, name)
) STRICT;
-- NULL request ids are distinct, so only real ones are unique.
CREATE UNIQUE INDEX battery_types_request ON battery_types (tenant, request_id);

CREATE TABLE batteries (
    tenant           TEXT    NOT NULL,
    id               TEXT    NOT NULL,
    type_name        TEXT    NOT NULL,
    -- stored_type_name equals type_name while that names a registered type, and is
    -- NULL for built-in types; the foreign key keeps a used type from being deleted.
    stored_type_name TEXT,
    series           INTEGER NOT NULL CHECK (series > 0),
    parallel         INTEGER NOT NULL CHECK (parallel > 0),
    display_name     TEXT    NOT NULL,
    labels           TEXT    NOT NULL, -- JSON object, the source of truth for reads
    request_id       TEXT,
    create_time      INTEGER NOT NULL,
    update_time      INTEGER NOT NULL,
    version          INTEGER NOT NULL,
    PRIMARY KEY (tenant, id),
    FOREIGN KEY (tenant, stored_type_name) REFERENCES battery_types (tenant, name)
) STRICT;
CREATE UNIQUE INDEX batteries_request ON batteries (tenant, request_id);
CREATE INDEX batteries_type ON batteries (tenant, type_name, id);
CREATE INDEX batteries_stored_type ON batteries (tenant, stored_type_name);

-- battery_labels repeats batteries.labels, one row per pair, for indexed filtering.
CREATE TABLE battery_labels (
    tenant     TEXT NOT NULL,
    battery_id TEXT NOT NULL,
    key        TEXT NOT NULL,
    value      TEXT NOT NULL,
    PRIMARY KEY (tenant, battery_id, key),
    FOREIGN KEY (tenant, battery_id) REFERENCES batteries (tenant, id) ON DELETE CASCADE
) STRICT, WITHOUT ROWID;
CREATE INDEX battery_labels_match ON battery_labels (tenant, key, value, battery_id);

CREATE TRIGGER battery_types_version AFTER INSERT ON battery_types
BEGIN
    UPDATE store_versions SET value = NEW.version WHERE id = 1 AND value < NEW.version;
END;
CREATE TRIGGER batteries_version_insert AFTER INSERT ON batteries
BEGIN
    UPDATE store_versions SET value = NEW.version WHERE id = 1 AND value < NEW.version;
END;
CREATE TRIGGER batteries_version_update AFTER UPDATE OF version ON batteries
BEGIN
    UPDATE store_versions SET value = NEW.version WHERE id = 1 AND value < NEW.version;
END;
