-- ohmsight run store, schema version 6: the board's pull as the pull test needs it.
--
-- Protocol 6 boards report their pull's tolerance (ppm, ±2σ) and the level their pull-up goes
-- to (µV) beside its resistance. Runs stored before this version read as 0 for both: a board
-- that reported no pull test.

ALTER TABLE runs ADD COLUMN fe_pull_tolerance_ppm BIGINT NOT NULL DEFAULT 0;
ALTER TABLE runs ADD COLUMN fe_pull_supply_microvolts BIGINT NOT NULL DEFAULT 0;
