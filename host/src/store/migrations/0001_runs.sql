-- ohmsight run store, schema version 1.
--
-- One run record spread over normalised tables, keyed by the run id (a ULID: sortable, unique
-- across stations). Every integer is BIGINT (u64 values are stored as their two's-complement
-- i64); every real is an f64 kept bit for bit; times are RFC 3339 UTC text of fixed width
-- (2026-12-03T03:06:28.123Z), so text order is time order. Short lists are JSON text.
--
-- The same statements run on SQLite and PostgreSQL, but for markers that store/schema.rs fills in
-- per backend:
-- - the f64 columns' type: DOUBLE PRECISION on PostgreSQL, none on SQLite, since a SQLite column
--   of REAL affinity stores a whole-number real as an integer and so turns -0.0 into 0 (a column
--   without a declared type keeps the REAL as given; it still reads as a real in SQL);
-- - SQLite's compact WITHOUT ROWID form of the two big tables (nothing on PostgreSQL).

-- Board names as the boards report them.
CREATE TABLE boards (
    name TEXT NOT NULL PRIMARY KEY,
    first_seen TEXT NOT NULL
);

-- Physical units: a unit id is unique within a board (the chip's id, 16 hex digits).
CREATE TABLE units (
    board TEXT NOT NULL REFERENCES boards (name),
    unit_id TEXT NOT NULL,
    first_seen TEXT NOT NULL,
    PRIMARY KEY (board, unit_id)
);

-- One row per run: who, when, how, whether it finished, its traffic; then the board's own
-- description (board_*, fe_*: integers as on the wire) and the converter values the analysis
-- used (profile_*: SI units).
CREATE TABLE runs (
    id TEXT NOT NULL PRIMARY KEY,
    kind TEXT NOT NULL,
    started TEXT NOT NULL,
    finished TEXT,
    board TEXT NOT NULL,
    unit_id TEXT NOT NULL,
    tool_version TEXT NOT NULL,
    firmware_version TEXT NOT NULL,
    protocol_version BIGINT NOT NULL,
    link_kind TEXT NOT NULL,            -- in-process | serial
    link_port TEXT,
    link_baud BIGINT,
    scenario TEXT,
    seed BIGINT,
    command TEXT NOT NULL,
    requested_channels TEXT NOT NULL,   -- JSON array; empty: every pin
    complete BOOLEAN NOT NULL,
    fault TEXT,
    conversions BIGINT NOT NULL,
    link_bytes_sent BIGINT NOT NULL,
    link_bytes_received BIGINT NOT NULL,
    bad_frames BIGINT NOT NULL,
    reruns BIGINT NOT NULL,
    board_seconds @DOUBLE@ NOT NULL,
    wall_seconds @DOUBLE@ NOT NULL,
    board_name TEXT NOT NULL,
    board_firmware TEXT NOT NULL,
    board_protocol BIGINT NOT NULL,
    board_unit_id BIGINT NOT NULL,
    fe_bits BIGINT NOT NULL,
    fe_vref_microvolts BIGINT NOT NULL,
    fe_sample_ps TEXT NOT NULL,         -- JSON array of ps
    fe_conversion_ps BIGINT NOT NULL,
    fe_hold_attofarads BIGINT NOT NULL,
    fe_hold_tolerance_ppm BIGINT NOT NULL,
    fe_switch_milliohms BIGINT NOT NULL,
    fe_switch_tolerance_ppm BIGINT NOT NULL,
    fe_noise_millilsb BIGINT NOT NULL,
    fe_leakage_picoamps BIGINT NOT NULL,
    fe_pull_milliohms BIGINT NOT NULL,
    fe_precharges TEXT NOT NULL,        -- JSON [{"channel", "nominal_microvolts"}]
    profile_bits BIGINT NOT NULL,
    profile_vref_volts @DOUBLE@ NOT NULL,
    profile_sample_ps TEXT NOT NULL,    -- JSON array of ps
    profile_conversion_ps BIGINT NOT NULL,
    profile_hold_farads @DOUBLE@ NOT NULL,
    profile_hold_tolerance @DOUBLE@ NOT NULL,
    profile_switch_ohms @DOUBLE@ NOT NULL,
    profile_switch_tolerance @DOUBLE@ NOT NULL,
    profile_adc_noise_lsb @DOUBLE@ NOT NULL,
    profile_leakage_amps @DOUBLE@ NOT NULL,
    profile_precharges TEXT NOT NULL,   -- JSON [{"channel", "nominal_volts"}]
    profile_source TEXT NOT NULL,
    FOREIGN KEY (board, unit_id) REFERENCES units (board, unit_id)
);
CREATE INDEX runs_by_start ON runs (started);
CREATE INDEX runs_by_unit ON runs (board, unit_id, started);

-- The board's channel list, in the board's order.
CREATE TABLE channels (
    run_id TEXT NOT NULL REFERENCES runs (id) ON DELETE CASCADE,
    ordinal BIGINT NOT NULL,
    channel BIGINT NOT NULL,
    label TEXT NOT NULL,
    role TEXT NOT NULL,                 -- pin | precharge | internal
    PRIMARY KEY (run_id, ordinal)
);

-- The pins the run set out to survey, in survey order; the result columns are written when the
-- run finishes (NULL before).
CREATE TABLE pins (
    run_id TEXT NOT NULL REFERENCES runs (id) ON DELETE CASCADE,
    channel BIGINT NOT NULL,
    ordinal BIGINT NOT NULL,
    label TEXT NOT NULL,
    complete BOOLEAN NOT NULL,
    verdict TEXT,
    reason TEXT,
    source_ohms @DOUBLE@,
    source_ohms_low @DOUBLE@,
    source_ohms_high @DOUBLE@,
    node_farads @DOUBLE@,
    node_farads_low @DOUBLE@,
    node_farads_high @DOUBLE@,
    source_volts @DOUBLE@,
    noise_lsb_rms @DOUBLE@,
    min_sample_ns @DOUBLE@,
    flags TEXT,                         -- JSON array of flag names
    PRIMARY KEY (run_id, channel)
);
CREATE INDEX pins_by_verdict ON pins (verdict);

-- Every experiment, by its position in the run.
CREATE TABLE experiments (
    run_id TEXT NOT NULL REFERENCES runs (id) ON DELETE CASCADE,
    seq BIGINT NOT NULL,
    purpose TEXT NOT NULL,              -- precharge-level | screen | detail | noise | memory
    pin BIGINT,                         -- NULL for a precharge source's level
    kind TEXT NOT NULL,                 -- precharge-sweep | order-swap | repeat-burst | period-sweep | noise-record
    parameters TEXT NOT NULL,           -- JSON, as the record's experiment (with its kind)
    start_ps BIGINT NOT NULL,
    end_ps BIGINT NOT NULL,
    attempts BIGINT NOT NULL,
    conversions BIGINT NOT NULL,
    PRIMARY KEY (run_id, seq)
);

-- The integer aggregate of each cell of an experiment, as the board sent it.
CREATE TABLE cells (
    run_id TEXT NOT NULL,
    seq BIGINT NOT NULL,
    cell_index BIGINT NOT NULL,
    count BIGINT NOT NULL,
    sum BIGINT NOT NULL,
    sum_sq BIGINT NOT NULL,
    min BIGINT NOT NULL,
    max BIGINT NOT NULL,
    PRIMARY KEY (run_id, seq, cell_index),
    FOREIGN KEY (run_id, seq) REFERENCES experiments (run_id, seq) ON DELETE CASCADE
) @WITHOUT_ROWID@;

-- Raw codes (noise records), in order.
CREATE TABLE samples (
    run_id TEXT NOT NULL,
    seq BIGINT NOT NULL,
    sample_index BIGINT NOT NULL,
    code BIGINT NOT NULL,
    PRIMARY KEY (run_id, seq, sample_index),
    FOREIGN KEY (run_id, seq) REFERENCES experiments (run_id, seq) ON DELETE CASCADE
) @WITHOUT_ROWID@;
