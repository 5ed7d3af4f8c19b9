-- ohmsight run store, schema version 3: the outcome of production checks (runs of kind
-- `check`), so that yield and process capability can be computed in SQL.
--
-- `checks` holds one row per check run: the unit's serial (as the station gave it with --unit,
-- else the board's unit id), the result (pass, fail, error) and the limits file it was judged
-- by (its name, path and whole text). `check_limits` holds one row per pin and limit: the
-- measured value with its 95% interval (NULL ends: a bound; all NULL: nothing measured), the
-- limit's own ends (NULL: that side open), the expected and measured words of a verdict or hum
-- limit, and the outcome (pass, fail, undecided).

CREATE TABLE checks (
    run_id TEXT NOT NULL PRIMARY KEY REFERENCES runs (id) ON DELETE CASCADE,
    unit_serial TEXT NOT NULL,
    result TEXT NOT NULL,               -- pass | fail | error
    limits_name TEXT NOT NULL,
    limits_file TEXT NOT NULL,
    limits_toml TEXT NOT NULL
);
CREATE INDEX checks_by_serial ON checks (unit_serial);

CREATE TABLE check_limits (
    run_id TEXT NOT NULL REFERENCES checks (run_id) ON DELETE CASCADE,
    channel BIGINT NOT NULL,
    ordinal BIGINT NOT NULL,
    label TEXT NOT NULL,
    limit_name TEXT NOT NULL,           -- verdict | source_ohms | source_volts | node_farads | noise_lsb_max | hum | min_sample_ns_max
    outcome TEXT NOT NULL,              -- pass | fail | undecided
    measured @DOUBLE@,
    measured_low @DOUBLE@,
    measured_high @DOUBLE@,
    limit_low @DOUBLE@,
    limit_high @DOUBLE@,
    expected TEXT,
    measured_text TEXT NOT NULL,
    PRIMARY KEY (run_id, ordinal)
);
CREATE INDEX check_limits_by_limit ON check_limits (channel, limit_name);
