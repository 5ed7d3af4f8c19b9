-- ohmsight run store, schema version 2: each experiment as the board reported it (protocol 3).
--
-- start_ps and end_ps now hold the board's own clock at the start and end of the run; the
-- board's run number and whether the host took the run's records join them. A run the host has
-- no records of (a request that reached the board twice, an answer lost) is an experiment row
-- without cells or samples and with received false. The host no longer counts attempts.

ALTER TABLE experiments ADD COLUMN board_run BIGINT NOT NULL DEFAULT 0;
ALTER TABLE experiments ADD COLUMN received BOOLEAN NOT NULL DEFAULT TRUE;
ALTER TABLE experiments DROP COLUMN attempts;
