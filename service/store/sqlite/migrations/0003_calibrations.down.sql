DROP TABLE calibrations;
