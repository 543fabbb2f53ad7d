DROP TABLE battery_labels;
DROP TABLE batteries;
DROP TABLE battery_types;
DROP SEQUENCE store_versions;
DROP TABLE store_meta;
