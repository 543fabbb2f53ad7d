-- Core tables: store metadata, the version sequence, battery types, batteries, labels.
-- JSON blobs use the json type: validated, kept byte for byte, readable with ->>.

-- store_meta holds store-wide values, such as the page-token signing key.
CREATE TABLE store_meta (
    key   text  PRIMARY KEY,
    value bytea NOT NULL
);

-- Every write takes nextval('store_versions') as the new version, so versions are
-- never reused, not even after a delete and re-create.
CREATE SEQUENCE store_versions;

CREATE TABLE battery_types (
    tenant         text        NOT NULL,
    name           text        NOT NULL,
    display_name   text        NOT NULL,
    chemistry      text        NOT NULL,
    parameters     json        NOT NULL,
    calibration_id text        NOT NULL,
    request_id     text,
    create_time    timestamptz NOT NULL,
    update_time    timestamptz NOT NULL,
    version        bigint      NOT NULL,
    PRIMARY KEY (tenant, name)
);
-- NULL request ids are distinct, so only real ones are unique.
CREATE UNIQUE INDEX battery_types_request ON battery_types (tenant, request_id);

CREATE TABLE batteries (
    tenant           text        NOT NULL,
    id               text        NOT NULL,
    type_name        text        NOT NULL,
    -- stored_type_name equals type_name while that names a registered type, and is
    -- NULL for built-in types; the foreign key keeps a used type from being deleted.
    stored_type_name text,
    series           integer     NOT NULL CHECK (series > 0),
    parallel         integer     NOT NULL CHECK (parallel > 0),
    display_name     text        NOT NULL,
    labels           text        NOT NULL, -- JSON object, the source of truth for reads
    request_id       text,
    create_time      timestamptz NOT NULL,
    update_time      timestamptz NOT NULL,
    version          bigint      NOT NULL,
    PRIMARY KEY (tenant, id),
    FOREIGN KEY (tenant, stored_type_name) REFERENCES battery_types (tenant, name)
);
CREATE UNIQUE INDEX batteries_request ON batteries (tenant, request_id);
CREATE INDEX batteries_type ON batteries (tenant, type_name, id);
CREATE INDEX batteries_stored_type ON batteries (tenant, stored_type_name);

-- battery_labels repeats batteries.labels, one row per pair, for indexed filtering.
CREATE TABLE battery_labels (
    tenant     text NOT NULL,
    battery_id text NOT NULL,
    key        text NOT NULL,
    value      text NOT NULL,
    PRIMARY KEY (tenant, battery_id, key),
    FOREIGN KEY (tenant, battery_id) REFERENCES batteries (tenant, id) ON DELETE CASCADE
);
CREATE INDEX battery_labels_match ON battery_labels (tenant, key, value, battery_id);
