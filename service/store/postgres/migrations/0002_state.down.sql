DROP TABLE health_records;
DROP TABLE battery_states;
