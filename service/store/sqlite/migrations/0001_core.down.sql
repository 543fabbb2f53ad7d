DROP TABLE battery_labels;
DROP TABLE batteries;
DROP TABLE battery_types;
DROP TABLE store_versions;
DROP TABLE store_meta;
