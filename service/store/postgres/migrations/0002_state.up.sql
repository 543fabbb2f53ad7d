-- Tracked estimator state (one row per battery, written by compare-and-swap on
-- version) and the compact health history.

CREATE TABLE battery_states (
    tenant              text             NOT NULL,
    battery_id          text             NOT NULL,
    estimator           json             NOT NULL, -- opaque JSON of the estimator
    soc                 double precision NOT NULL,
    soc_sigma           double precision NOT NULL,
    capacity_factor     double precision NOT NULL,
    resistance_factor   double precision NOT NULL,
    equivalent_cycles   double precision NOT NULL,
    temperature_celsius double precision NOT NULL,
    voltage_volts       double precision NOT NULL,
    current_amps        double precision NOT NULL, -- positive = discharge
    -- The watermark: the last sample folded into estimator. Written in the same row
    -- as the estimator, so the two never disagree.
    last_sequence       bigint           NOT NULL CHECK (last_sequence >= 0),
    last_sample_time    timestamptz,
    update_time         timestamptz      NOT NULL,
    version             bigint           NOT NULL,
    PRIMARY KEY (tenant, battery_id),
    FOREIGN KEY (tenant, battery_id) REFERENCES batteries (tenant, id) ON DELETE CASCADE
);

CREATE TABLE health_records (
    tenant            text             NOT NULL,
    battery_id        text             NOT NULL,
    time              timestamptz      NOT NULL,
    capacity_factor   double precision NOT NULL,
    resistance_factor double precision NOT NULL,
    soc               double precision NOT NULL,
    equivalent_cycles double precision NOT NULL,
    PRIMARY KEY (tenant, battery_id, time),
    FOREIGN KEY (tenant, battery_id) REFERENCES batteries (tenant, id) ON DELETE CASCADE
);
