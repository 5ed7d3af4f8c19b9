-- ohmsight run store, schema version 4: per-unit calibrations of the converter.
--
-- `ohmsight calibrate` surveys fixture pins of known resistance (a run of kind `calibration`)
-- and fits the unit's hold capacitance and switch resistance from them. One row per
-- calibration run: the board and unit it belongs to, when it was made, each value with the ends
-- of its 95% interval (F and Ω), the fit's χ² and degrees of freedom, and the fixtures as JSON
-- text ([{"channel", "ohms", "tolerance", "node_farads"}]). Later runs of the unit use its
-- newest row.

CREATE TABLE calibrations (
    run_id TEXT NOT NULL PRIMARY KEY REFERENCES runs (id) ON DELETE CASCADE,
    board TEXT NOT NULL,
    unit_id TEXT NOT NULL,
    created TEXT NOT NULL,
    hold_farads @DOUBLE@ NOT NULL,
    hold_low @DOUBLE@ NOT NULL,
    hold_high @DOUBLE@ NOT NULL,
    switch_ohms @DOUBLE@ NOT NULL,
    switch_low @DOUBLE@ NOT NULL,
    switch_high @DOUBLE@ NOT NULL,
    chi2 @DOUBLE@ NOT NULL,
    dof BIGINT NOT NULL,
    fixtures TEXT NOT NULL,
    FOREIGN KEY (board, unit_id) REFERENCES units (board, unit_id)
);
CREATE INDEX calibrations_by_unit ON calibrations (board, unit_id, created);
