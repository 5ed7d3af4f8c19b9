//! The run record to and from rows, written once for both backends over [`Db`].

use super::backend::{i64_to_u64, insert_rows, read, write, Arg, Db, Val};
use super::{
    CalibrationSummary, CheckSummary, LimitSummary, PinSummary, RunFilter, RunListing, Store, StoreError, MIN_PREFIX,
};
use crate::record::{
    BoardRecord, CellRecord, ChannelRecord, ExperimentRecord, ExperimentSpec, FrontEndRecord, LinkRecord, PinRecord,
    PrechargeRecord, Profile, ProfilePrecharge, Purpose, RunKind, RunMeta, RunRecord, RunStats,
};
use serde::de::DeserializeOwned;
use std::collections::BTreeMap;

/// A [`Store`] over any backend.
pub(crate) struct SqlStore<D: Db> {
    db: D,
}

impl<D: Db> SqlStore<D> {
    /// A store on an open, migrated database.
    pub fn new(db: D) -> Self {
        SqlStore { db }
    }
}

/// The `runs` columns, in the order [`run_row`] fills them and [`run_from_row`] reads them.
const RUN_COLUMNS: &[&str] = &[
    "id",
    "kind",
    "started",
    "finished",
    "board",
    "unit_id",
    "tool_version",
    "firmware_version",
    "protocol_version",
    "link_kind",
    "link_port",
    "link_baud",
    "scenario",
    "seed",
    "command",
    "requested_channels",
    "complete",
    "fault",
    "conversions",
    "link_bytes_sent",
    "link_bytes_received",
    "bad_frames",
    "reruns",
    "board_seconds",
    "wall_seconds",
    "board_name",
    "board_firmware",
    "board_protocol",
    "board_unit_id",
    "fe_bits",
    "fe_vref_microvolts",
    "fe_sample_ps",
    "fe_conversion_ps",
    "fe_hold_attofarads",
    "fe_hold_tolerance_ppm",
    "fe_switch_milliohms",
    "fe_switch_tolerance_ppm",
    "fe_noise_millilsb",
    "fe_leakage_picoamps",
    "fe_pull_milliohms",
    "fe_pull_tolerance_ppm",
    "fe_pull_supply_microvolts",
    "fe_precharges",
    "profile_bits",
    "profile_vref_volts",
    "profile_sample_ps",
    "profile_conversion_ps",
    "profile_hold_farads",
    "profile_hold_tolerance",
    "profile_switch_ohms",
    "profile_switch_tolerance",
    "profile_adc_noise_lsb",
    "profile_leakage_amps",
    "profile_precharges",
    "profile_source",
];

/// JSON text of a short list (serialising these plain types cannot fail).
fn json<T: serde::Serialize + ?Sized>(value: &T) -> Arg {
    Arg::Text(Some(serde_json::to_string(value).unwrap_or_default()))
}

fn stats_args(s: &RunStats) -> Vec<Arg> {
    vec![
        Arg::u64(s.conversions),
        Arg::u64(s.link_bytes_sent),
        Arg::u64(s.link_bytes_received),
        Arg::u64(s.bad_frames),
        Arg::u64(s.reruns),
        Arg::real(s.board_seconds),
        Arg::real(s.wall_seconds),
    ]
}

/// The `runs` row of a record, in [`RUN_COLUMNS`] order.
fn run_row(record: &RunRecord) -> Vec<Arg> {
    let m = &record.run;
    let b = &record.board;
    let fe = &b.front_end;
    let p = &record.profile;
    let (link_kind, link_port, link_baud) = match &m.link {
        LinkRecord::InProcess => ("in-process", None, None),
        LinkRecord::Serial { port, baud } => ("serial", Some(port.as_str()), Some(i64::from(*baud))),
    };
    let mut row = vec![
        Arg::text(&m.id),
        Arg::text(m.kind.as_str()),
        Arg::text(&m.started),
        Arg::opt_text(m.finished.as_deref()),
        Arg::text(&m.board),
        Arg::text(&m.unit_id),
        Arg::text(&m.tool_version),
        Arg::text(&m.firmware_version),
        Arg::int(m.protocol_version),
        Arg::text(link_kind),
        Arg::opt_text(link_port),
        Arg::Int(link_baud),
        Arg::opt_text(m.scenario.as_deref()),
        Arg::opt_u64(m.seed),
        Arg::text(&m.command),
        json(&m.channels),
        Arg::Bool(m.complete),
        Arg::opt_text(m.fault.as_deref()),
    ];
    row.extend(stats_args(&m.stats));
    row.extend([
        Arg::text(&b.name),
        Arg::text(&b.firmware),
        Arg::int(b.protocol),
        Arg::u64(b.unit_id),
        Arg::int(fe.bits),
        Arg::int(fe.vref_microvolts),
        json(&fe.sample_ps),
        Arg::int(fe.conversion_ps),
        Arg::int(fe.hold_attofarads),
        Arg::int(fe.hold_tolerance_ppm),
        Arg::int(fe.switch_milliohms),
        Arg::int(fe.switch_tolerance_ppm),
        Arg::int(fe.noise_millilsb),
        Arg::int(fe.leakage_picoamps),
        Arg::int(fe.pull_milliohms),
        Arg::int(fe.pull_tolerance_ppm),
        Arg::int(fe.pull_supply_microvolts),
        json(&fe.precharges),
        Arg::int(p.bits),
        Arg::real(p.vref_volts),
        json(&p.sample_ps),
        Arg::int(p.conversion_ps),
        Arg::real(p.hold_farads),
        Arg::real(p.hold_tolerance),
        Arg::real(p.switch_ohms),
        Arg::real(p.switch_tolerance),
        Arg::real(p.adc_noise_lsb),
        Arg::real(p.leakage_amps),
        json(&p.precharges),
        Arg::text(&p.source),
    ]);
    debug_assert_eq!(row.len(), RUN_COLUMNS.len());
    row
}

/// Reads a row's values in order, naming the run and column in any error.
struct Cols<'a> {
    run: &'a str,
    table: &'static str,
    values: std::slice::Iter<'a, Val>,
    index: usize,
}

impl<'a> Cols<'a> {
    fn new(run: &'a str, table: &'static str, row: &'a [Val]) -> Self {
        Cols { run, table, values: row.iter(), index: 0 }
    }

    fn corrupt(&self, what: &str) -> StoreError {
        StoreError::Corrupt {
            id: self.run.to_string(),
            detail: format!("{} column {}: {what}", self.table, self.index),
        }
    }

    fn next(&mut self) -> Result<&'a Val, StoreError> {
        self.index += 1;
        let index = self.index;
        self.values.next().ok_or_else(|| StoreError::Corrupt {
            id: self.run.to_string(),
            detail: format!("{} has no column {index}", self.table),
        })
    }

    fn opt_i64(&mut self) -> Result<Option<i64>, StoreError> {
        match self.next()? {
            Val::Null => Ok(None),
            Val::Int(v) => Ok(Some(*v)),
            Val::Bool(b) => Ok(Some(i64::from(*b))),
            other => Err(self.corrupt(&format!("{other:?} is not an integer"))),
        }
    }

    fn i64(&mut self) -> Result<i64, StoreError> {
        self.opt_i64()?.ok_or_else(|| self.corrupt("NULL where an integer belongs"))
    }

    fn int<T: TryFrom<i64>>(&mut self) -> Result<T, StoreError> {
        let v = self.i64()?;
        T::try_from(v).map_err(|_| self.corrupt(&format!("{v} is out of range")))
    }

    fn opt_int<T: TryFrom<i64>>(&mut self) -> Result<Option<T>, StoreError> {
        match self.opt_i64()? {
            None => Ok(None),
            Some(v) => T::try_from(v).map(Some).map_err(|_| self.corrupt(&format!("{v} is out of range"))),
        }
    }

    fn u64(&mut self) -> Result<u64, StoreError> {
        self.i64().map(i64_to_u64)
    }

    fn opt_u64(&mut self) -> Result<Option<u64>, StoreError> {
        self.opt_i64().map(|v| v.map(i64_to_u64))
    }

    fn opt_f64(&mut self) -> Result<Option<f64>, StoreError> {
        match self.next()? {
            Val::Null => Ok(None),
            Val::Real(v) => Ok(Some(*v)),
            // Only a value written by hand can be an integer here.
            Val::Int(v) => Ok(Some(*v as f64)),
            other => Err(self.corrupt(&format!("{other:?} is not a number"))),
        }
    }

    fn f64(&mut self) -> Result<f64, StoreError> {
        self.opt_f64()?.ok_or_else(|| self.corrupt("NULL where a number belongs"))
    }

    fn opt_text(&mut self) -> Result<Option<String>, StoreError> {
        match self.next()? {
            Val::Null => Ok(None),
            Val::Text(t) => Ok(Some(t.clone())),
            other => Err(self.corrupt(&format!("{other:?} is not text"))),
        }
    }

    fn text(&mut self) -> Result<String, StoreError> {
        self.opt_text()?.ok_or_else(|| self.corrupt("NULL where text belongs"))
    }

    fn bool(&mut self) -> Result<bool, StoreError> {
        match self.next()? {
            Val::Bool(b) => Ok(*b),
            Val::Int(0) => Ok(false),
            Val::Int(1) => Ok(true),
            other => Err(self.corrupt(&format!("{other:?} is not a boolean"))),
        }
    }

    fn json<T: DeserializeOwned>(&mut self) -> Result<T, StoreError> {
        let text = self.text()?;
        serde_json::from_str(&text).map_err(|e| self.corrupt(&format!("{e} in JSON {text:?}")))
    }
}

/// The record's meta, board (without channels) and profile from a `runs` row.
fn run_from_row(id: &str, row: &[Val]) -> Result<(RunMeta, BoardRecord, Profile), StoreError> {
    let mut c = Cols::new(id, "runs", row);
    let id = c.text()?;
    let kind_name = c.text()?;
    let kind = RunKind::parse(&kind_name).ok_or_else(|| c.corrupt(&format!("unknown kind of run {kind_name:?}")))?;
    let started = c.text()?;
    let finished = c.opt_text()?;
    let board = c.text()?;
    let unit_id = c.text()?;
    let tool_version = c.text()?;
    let firmware_version = c.text()?;
    let protocol_version = c.int()?;
    let link_kind = c.text()?;
    let link_port = c.opt_text()?;
    let link_baud: Option<u32> = c.opt_int()?;
    let link = match (link_kind.as_str(), link_port, link_baud) {
        ("in-process", None, None) => LinkRecord::InProcess,
        ("serial", Some(port), Some(baud)) => LinkRecord::Serial { port, baud },
        (other, ..) => return Err(c.corrupt(&format!("link {other:?} with a port and baud that do not fit it"))),
    };
    let scenario = c.opt_text()?;
    let seed = c.opt_u64()?;
    let command = c.text()?;
    let channels = c.json()?;
    let complete = c.bool()?;
    let fault = c.opt_text()?;
    let stats = RunStats {
        conversions: c.u64()?,
        link_bytes_sent: c.u64()?,
        link_bytes_received: c.u64()?,
        bad_frames: c.u64()?,
        reruns: c.u64()?,
        board_seconds: c.f64()?,
        wall_seconds: c.f64()?,
    };
    let meta = RunMeta {
        id,
        kind,
        started,
        finished,
        tool_version,
        firmware_version,
        protocol_version,
        board,
        unit_id,
        link,
        scenario,
        seed,
        command,
        channels,
        complete,
        fault,
        stats,
    };
    let name = c.text()?;
    let firmware = c.text()?;
    let protocol = c.int()?;
    let board_unit_id = c.u64()?;
    let front_end = FrontEndRecord {
        bits: c.int()?,
        vref_microvolts: c.int()?,
        sample_ps: c.json()?,
        conversion_ps: c.int()?,
        hold_attofarads: c.int()?,
        hold_tolerance_ppm: c.int()?,
        switch_milliohms: c.int()?,
        switch_tolerance_ppm: c.int()?,
        noise_millilsb: c.int()?,
        leakage_picoamps: c.int()?,
        pull_milliohms: c.int()?,
        pull_tolerance_ppm: c.int()?,
        pull_supply_microvolts: c.int()?,
        precharges: c.json::<Vec<PrechargeRecord>>()?,
    };
    let board = BoardRecord { name, firmware, protocol, unit_id: board_unit_id, front_end, channels: Vec::new() };
    let profile = Profile {
        bits: c.int()?,
        vref_volts: c.f64()?,
        sample_ps: c.json()?,
        conversion_ps: c.int()?,
        hold_farads: c.f64()?,
        hold_tolerance: c.f64()?,
        switch_ohms: c.f64()?,
        switch_tolerance: c.f64()?,
        adc_noise_lsb: c.f64()?,
        leakage_amps: c.f64()?,
        precharges: c.json::<Vec<ProfilePrecharge>>()?,
        source: c.text()?,
    };
    Ok((meta, board, profile))
}

fn run_exists<D: Db + ?Sized>(db: &mut D, id: &str) -> Result<bool, StoreError> {
    Ok(!db.query("SELECT 1 FROM runs WHERE id = $1", &[Arg::text(id)])?.is_empty())
}

fn unknown_run<D: Db + ?Sized>(db: &D, id: &str) -> StoreError {
    StoreError::UnknownRun { id: id.to_string(), database: db.describe() }
}

/// `%`, `_` and `\` escaped for LIKE … ESCAPE '\'.
fn like_escaped(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        if matches!(c, '%' | '_' | '\\') {
            out.push('\\');
        }
        out.push(c);
    }
    out
}

/// The full id of the run `id` names: the id itself, or a unique prefix of at least
/// [`MIN_PREFIX`] characters, in any case.
fn resolve<D: Db + ?Sized>(db: &mut D, id: &str) -> Result<String, StoreError> {
    let id = id.trim();
    if run_exists(db, id)? {
        return Ok(id.to_string());
    }
    if id.chars().count() < MIN_PREFIX {
        return Err(StoreError::ShortPrefix { id: id.to_string() });
    }
    let pattern = format!("{}%", like_escaped(&id.to_uppercase()));
    let rows = db.query(
        "SELECT id FROM runs WHERE upper(id) LIKE $1 ESCAPE '\\' ORDER BY id LIMIT 6",
        &[Arg::Text(Some(pattern))],
    )?;
    let mut ids = Vec::with_capacity(rows.len());
    for row in &rows {
        ids.push(Cols::new(id, "runs", row).text()?);
    }
    match ids.len() {
        0 => Err(unknown_run(db, id)),
        1 => Ok(ids.remove(0)),
        _ => Err(StoreError::AmbiguousRun { id: id.to_string(), matches: ids }),
    }
}

const EXPERIMENT_COLUMNS: &[&str] = &[
    "run_id",
    "seq",
    "purpose",
    "pin",
    "kind",
    "parameters",
    "board_run",
    "start_ps",
    "end_ps",
    "received",
    "conversions",
];

/// Writes one experiment with its cells and samples, replacing any stored at the same seq.
fn put_experiment<D: Db + ?Sized>(db: &mut D, run_id: &str, exp: &ExperimentRecord) -> Result<(), StoreError> {
    let key = [Arg::text(run_id), Arg::int(exp.seq)];
    // Children first: SQLite enforces the foreign keys only when a connection asks for it.
    db.execute("DELETE FROM samples WHERE run_id = $1 AND seq = $2", &key)?;
    db.execute("DELETE FROM cells WHERE run_id = $1 AND seq = $2", &key)?;
    db.execute("DELETE FROM experiments WHERE run_id = $1 AND seq = $2", &key)?;
    insert_rows(
        db,
        "experiments",
        EXPERIMENT_COLUMNS,
        &key,
        &[vec![
            Arg::text(exp.purpose.as_str()),
            Arg::Int(exp.pin.map(i64::from)),
            Arg::text(exp.experiment.kind()),
            json(&exp.experiment),
            Arg::int(exp.board_run),
            Arg::u64(exp.start_ps),
            Arg::u64(exp.end_ps),
            Arg::Bool(exp.received),
            Arg::int(exp.conversions),
        ]],
    )?;
    let cells: Vec<Vec<Arg>> = exp
        .cells
        .iter()
        .enumerate()
        .map(|(i, cell)| {
            vec![
                Arg::Int(Some(i as i64)),
                Arg::int(cell.count),
                Arg::u64(cell.sum),
                Arg::u64(cell.sum_sq),
                Arg::int(cell.min),
                Arg::int(cell.max),
            ]
        })
        .collect();
    insert_rows(db, "cells", &["run_id", "seq", "cell_index", "count", "sum", "sum_sq", "min", "max"], &key, &cells)?;
    let samples: Vec<Vec<Arg>> =
        exp.samples.iter().enumerate().map(|(i, &code)| vec![Arg::Int(Some(i as i64)), Arg::int(code)]).collect();
    insert_rows(db, "samples", &["run_id", "seq", "sample_index", "code"], &key, &samples)
}

/// The experiments of a run, with cells and samples, by seq.
fn load_experiments<D: Db + ?Sized>(db: &mut D, id: &str) -> Result<Vec<ExperimentRecord>, StoreError> {
    let key = [Arg::text(id)];
    let mut experiments = Vec::new();
    let mut by_seq = BTreeMap::new();
    for row in db.query(
        "SELECT seq, purpose, pin, parameters, board_run, start_ps, end_ps, received, conversions \
         FROM experiments WHERE run_id = $1 ORDER BY seq",
        &key,
    )? {
        let mut c = Cols::new(id, "experiments", &row);
        let seq: u32 = c.int()?;
        let purpose_name = c.text()?;
        let purpose =
            Purpose::parse(&purpose_name).ok_or_else(|| c.corrupt(&format!("unknown purpose {purpose_name:?}")))?;
        let pin = c.opt_int()?;
        let experiment: ExperimentSpec = c.json()?;
        by_seq.insert(seq, experiments.len());
        experiments.push(ExperimentRecord {
            seq,
            purpose,
            pin,
            experiment,
            board_run: c.int()?,
            start_ps: c.u64()?,
            end_ps: c.u64()?,
            received: c.bool()?,
            conversions: c.int()?,
            cells: Vec::new(),
            samples: Vec::new(),
        });
    }
    for row in db
        .query("SELECT seq, count, sum, sum_sq, min, max FROM cells WHERE run_id = $1 ORDER BY seq, cell_index", &key)?
    {
        let mut c = Cols::new(id, "cells", &row);
        let seq: u32 = c.int()?;
        let cell = CellRecord { count: c.int()?, sum: c.u64()?, sum_sq: c.u64()?, min: c.int()?, max: c.int()? };
        let at =
            *by_seq.get(&seq).ok_or_else(|| c.corrupt(&format!("a cell of experiment {seq}, which is missing")))?;
        experiments[at].cells.push(cell);
    }
    for row in db.query("SELECT seq, code FROM samples WHERE run_id = $1 ORDER BY seq, sample_index", &key)? {
        let mut c = Cols::new(id, "samples", &row);
        let seq: u32 = c.int()?;
        let code = c.int()?;
        let at =
            *by_seq.get(&seq).ok_or_else(|| c.corrupt(&format!("a sample of experiment {seq}, which is missing")))?;
        experiments[at].samples.push(code);
    }
    Ok(experiments)
}

/// The run row and the board's channel list: all of a record but its pins and experiments.
fn load_head<D: Db + ?Sized>(db: &mut D, id: &str) -> Result<(RunMeta, BoardRecord, Profile), StoreError> {
    let key = [Arg::text(id)];
    let sql = format!("SELECT {} FROM runs WHERE id = $1", RUN_COLUMNS.join(", "));
    let rows = db.query(&sql, &key)?;
    let row = rows.first().ok_or_else(|| unknown_run(db, id))?;
    let (run, mut board, profile) = run_from_row(id, row)?;
    for row in db.query(
        "SELECT channel, label, role, may_pull, may_drive FROM channels WHERE run_id = $1 ORDER BY ordinal",
        &key,
    )? {
        let mut c = Cols::new(id, "channels", &row);
        board.channels.push(ChannelRecord {
            channel: c.int()?,
            label: c.text()?,
            role: c.text()?,
            pull: c.bool()?,
            drive: c.bool()?,
        });
    }
    Ok((run, board, profile))
}

fn load_record<D: Db + ?Sized>(db: &mut D, id: &str) -> Result<RunRecord, StoreError> {
    let key = [Arg::text(id)];
    let (run, board, profile) = load_head(db, id)?;
    let mut pins = Vec::new();
    for row in db.query("SELECT channel, label, complete FROM pins WHERE run_id = $1 ORDER BY ordinal", &key)? {
        let mut c = Cols::new(id, "pins", &row);
        pins.push(PinRecord { channel: c.int()?, label: c.text()?, complete: c.bool()? });
    }
    let experiments = load_experiments(db, id)?;
    Ok(RunRecord { run, board, profile, pins, experiments })
}

/// `since` as the fixed-width UTC text the runs hold (rounded up to the millisecond), from RFC
/// 3339 with any offset or a date.
fn since_text(since: &str) -> Result<String, StoreError> {
    let text = since.trim();
    let ts = if let Ok(ts) = text.parse::<jiff::Timestamp>() {
        ts
    } else if let Ok(date) = text.parse::<jiff::civil::Date>() {
        date.to_zoned(jiff::tz::TimeZone::UTC).map_err(|_| StoreError::BadTime { text: since.into() })?.timestamp()
    } else {
        return Err(StoreError::BadTime { text: since.into() });
    };
    let mut ms = ts.as_millisecond();
    if jiff::Timestamp::from_millisecond(ms).is_ok_and(|t| t < ts) {
        ms += 1;
    }
    let rounded = jiff::Timestamp::from_millisecond(ms).map_err(|_| StoreError::BadTime { text: since.into() })?;
    Ok(rounded.strftime("%Y-%m-%dT%H:%M:%S%.3fZ").to_string())
}

/// The WHERE clause (on `runs r`) and its arguments for a filter.
fn filter_clause(filter: &RunFilter) -> Result<(String, Vec<Arg>), StoreError> {
    let mut clause = String::from("WHERE 1 = 1");
    let mut args = Vec::new();
    if let Some(unit) = &filter.unit {
        args.push(Arg::text(&unit.trim().to_lowercase()));
        clause.push_str(&format!(" AND lower(r.unit_id) = ${}", args.len()));
    }
    if let Some(board) = &filter.board {
        args.push(Arg::text(board));
        clause.push_str(&format!(" AND r.board = ${}", args.len()));
    }
    if let Some(since) = &filter.since {
        args.push(Arg::Text(Some(since_text(since)?)));
        clause.push_str(&format!(" AND r.started >= ${}", args.len()));
    }
    if let Some(kind) = filter.kind {
        args.push(Arg::text(kind.as_str()));
        clause.push_str(&format!(" AND r.kind = ${}", args.len()));
    }
    Ok((clause, args))
}

/// The columns of `check_limits`, `run_id` first.
const CHECK_LIMIT_COLUMNS: &[&str] = &[
    "run_id",
    "channel",
    "ordinal",
    "label",
    "limit_name",
    "outcome",
    "measured",
    "measured_low",
    "measured_high",
    "limit_low",
    "limit_high",
    "expected",
    "measured_text",
];

fn f64_args(values: &[Option<f64>]) -> impl Iterator<Item = Arg> + '_ {
    values.iter().map(|v| Arg::Real(*v))
}

impl<D: Db> Store for SqlStore<D> {
    fn describe(&self) -> String {
        self.db.describe()
    }

    fn put_check(&mut self, run_id: &str, check: &CheckSummary) -> Result<(), StoreError> {
        write(&mut self.db, &format!("storing the check of run {run_id}"), |db| {
            if !run_exists(db, run_id)? {
                return Err(unknown_run(db, run_id));
            }
            db.execute("DELETE FROM check_limits WHERE run_id = $1", &[Arg::text(run_id)])?;
            db.execute("DELETE FROM checks WHERE run_id = $1", &[Arg::text(run_id)])?;
            db.execute(
                "INSERT INTO checks (run_id, unit_serial, result, limits_name, limits_file, limits_toml) \
                 VALUES ($1, $2, $3, $4, $5, $6)",
                &[
                    Arg::text(run_id),
                    Arg::text(&check.unit_serial),
                    Arg::text(&check.result),
                    Arg::text(&check.limits_name),
                    Arg::text(&check.limits_file),
                    Arg::text(&check.limits_toml),
                ],
            )?;
            let rows: Vec<Vec<Arg>> = check
                .limits
                .iter()
                .enumerate()
                .map(|(i, l)| {
                    let mut row = vec![
                        Arg::int(l.channel),
                        Arg::Int(Some(i as i64)),
                        Arg::text(&l.label),
                        Arg::text(&l.limit),
                        Arg::text(&l.outcome),
                    ];
                    row.extend(f64_args(&l.measured));
                    row.extend(f64_args(&l.limit_range));
                    row.push(Arg::opt_text(l.expected.as_deref()));
                    row.push(Arg::text(&l.measured_text));
                    row
                })
                .collect();
            insert_rows(db, "check_limits", CHECK_LIMIT_COLUMNS, &[Arg::text(run_id)], &rows)
        })
    }

    fn load_check(&mut self, id: &str) -> Result<Option<CheckSummary>, StoreError> {
        read(&mut self.db, &format!("reading the check of run {id}"), |db| {
            let full = resolve(db, id)?;
            let rows = db.query(
                "SELECT unit_serial, result, limits_name, limits_file, limits_toml FROM checks WHERE run_id = $1",
                &[Arg::text(&full)],
            )?;
            let Some(row) = rows.first() else { return Ok(None) };
            let mut c = Cols::new(&full, "checks", row);
            let mut check = CheckSummary {
                unit_serial: c.text()?,
                result: c.text()?,
                limits_name: c.text()?,
                limits_file: c.text()?,
                limits_toml: c.text()?,
                limits: Vec::new(),
            };
            let rows = db.query(
                &format!(
                    "SELECT {} FROM check_limits WHERE run_id = $1 ORDER BY ordinal",
                    CHECK_LIMIT_COLUMNS[1..].join(", ")
                ),
                &[Arg::text(&full)],
            )?;
            for row in &rows {
                let mut c = Cols::new(&full, "check_limits", row);
                let channel = c.int::<u8>()?;
                let _ordinal = c.i64()?;
                check.limits.push(LimitSummary {
                    channel,
                    label: c.text()?,
                    limit: c.text()?,
                    outcome: c.text()?,
                    measured: [c.opt_f64()?, c.opt_f64()?, c.opt_f64()?],
                    limit_range: [c.opt_f64()?, c.opt_f64()?],
                    expected: c.opt_text()?,
                    measured_text: c.text()?,
                });
            }
            Ok(Some(check))
        })
    }

    fn put_calibration(&mut self, c: &CalibrationSummary) -> Result<(), StoreError> {
        let run_id = c.run_id.as_str();
        write(&mut self.db, &format!("storing the calibration of run {run_id}"), |db| {
            if !run_exists(db, run_id)? {
                return Err(unknown_run(db, run_id));
            }
            db.execute("DELETE FROM calibrations WHERE run_id = $1", &[Arg::text(run_id)])?;
            let mut args = vec![Arg::text(run_id), Arg::text(&c.board), Arg::text(&c.unit_id), Arg::text(&c.created)];
            args.extend(c.hold_farads.iter().chain(&c.switch_ohms).chain([&c.chi2]).map(|&v| Arg::real(v)));
            args.push(Arg::u64(c.dof));
            args.push(json(&c.fixtures));
            db.execute(
                "INSERT INTO calibrations (run_id, board, unit_id, created, hold_farads, hold_low, hold_high, \
                 switch_ohms, switch_low, switch_high, chi2, dof, fixtures) \
                 VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13)",
                &args,
            )?;
            Ok(())
        })
    }

    fn latest_calibration(&mut self, board: &str, unit_id: &str) -> Result<Option<CalibrationSummary>, StoreError> {
        read(&mut self.db, &format!("reading the calibration of unit {unit_id}"), |db| {
            let rows = db.query(
                "SELECT run_id, board, unit_id, created, hold_farads, hold_low, hold_high, switch_ohms, switch_low, \
                 switch_high, chi2, dof, fixtures FROM calibrations WHERE board = $1 AND unit_id = $2 \
                 ORDER BY created DESC, run_id DESC LIMIT 1",
                &[Arg::text(board), Arg::text(&unit_id.to_ascii_lowercase())],
            )?;
            let Some(row) = rows.first() else { return Ok(None) };
            let mut c = Cols::new(unit_id, "calibrations", row);
            Ok(Some(CalibrationSummary {
                run_id: c.text()?,
                board: c.text()?,
                unit_id: c.text()?,
                created: c.text()?,
                hold_farads: [c.f64()?, c.f64()?, c.f64()?],
                switch_ohms: [c.f64()?, c.f64()?, c.f64()?],
                chi2: c.f64()?,
                dof: i64_to_u64(c.i64()?),
                fixtures: c.json()?,
            }))
        })
    }

    fn begin_run(&mut self, record: &RunRecord) -> Result<(), StoreError> {
        let m = &record.run;
        let id = m.id.as_str();
        write(&mut self.db, &format!("storing run {id}"), |db| {
            if run_exists(db, id)? {
                return Err(StoreError::RunExists { id: id.to_string() });
            }
            // ON CONFLICT DO NOTHING: stations inserting the same board at once both succeed.
            db.execute(
                "INSERT INTO boards (name, first_seen) VALUES ($1, $2) ON CONFLICT (name) DO NOTHING",
                &[Arg::text(&m.board), Arg::text(&m.started)],
            )?;
            db.execute(
                "INSERT INTO units (board, unit_id, first_seen) VALUES ($1, $2, $3) \
                 ON CONFLICT (board, unit_id) DO NOTHING",
                &[Arg::text(&m.board), Arg::text(&m.unit_id), Arg::text(&m.started)],
            )?;
            insert_rows(db, "runs", RUN_COLUMNS, &[], &[run_row(record)])?;
            let channels: Vec<Vec<Arg>> = record
                .board
                .channels
                .iter()
                .enumerate()
                .map(|(i, ch)| {
                    vec![
                        Arg::Int(Some(i as i64)),
                        Arg::int(ch.channel),
                        Arg::text(&ch.label),
                        Arg::text(&ch.role),
                        Arg::Bool(ch.pull),
                        Arg::Bool(ch.drive),
                    ]
                })
                .collect();
            insert_rows(
                db,
                "channels",
                &["run_id", "ordinal", "channel", "label", "role", "may_pull", "may_drive"],
                &[Arg::text(id)],
                &channels,
            )?;
            let pins: Vec<Vec<Arg>> = record
                .pins
                .iter()
                .enumerate()
                .map(|(i, pin)| {
                    vec![
                        Arg::int(pin.channel),
                        Arg::Int(Some(i as i64)),
                        Arg::text(&pin.label),
                        Arg::Bool(pin.complete),
                    ]
                })
                .collect();
            insert_rows(db, "pins", &["run_id", "channel", "ordinal", "label", "complete"], &[Arg::text(id)], &pins)?;
            for exp in &record.experiments {
                put_experiment(db, id, exp)?;
            }
            Ok(())
        })
    }

    fn add_experiment(&mut self, run_id: &str, exp: &ExperimentRecord) -> Result<(), StoreError> {
        write(&mut self.db, &format!("storing experiment {} of run {run_id}", exp.seq), |db| {
            if !run_exists(db, run_id)? {
                return Err(unknown_run(db, run_id));
            }
            put_experiment(db, run_id, exp)
        })
    }

    fn set_pin_complete(&mut self, run_id: &str, channel: u8, complete: bool) -> Result<(), StoreError> {
        write(&mut self.db, &format!("marking channel {channel} of run {run_id}"), |db| {
            let changed = db.execute(
                "UPDATE pins SET complete = $3 WHERE run_id = $1 AND channel = $2",
                &[Arg::text(run_id), Arg::int(channel), Arg::Bool(complete)],
            )?;
            if changed == 0 {
                return Err(if run_exists(db, run_id)? {
                    StoreError::UnknownPin { id: run_id.to_string(), channel }
                } else {
                    unknown_run(db, run_id)
                });
            }
            Ok(())
        })
    }

    fn finish_run(&mut self, meta: &RunMeta, pins: &[PinSummary]) -> Result<(), StoreError> {
        let id = meta.id.as_str();
        write(&mut self.db, &format!("finishing run {id}"), |db| {
            let mut args = vec![
                Arg::text(id),
                Arg::opt_text(meta.finished.as_deref()),
                Arg::Bool(meta.complete),
                Arg::opt_text(meta.fault.as_deref()),
            ];
            args.extend(stats_args(&meta.stats));
            let changed = db.execute(
                "UPDATE runs SET finished = $2, complete = $3, fault = $4, conversions = $5, link_bytes_sent = $6, \
                 link_bytes_received = $7, bad_frames = $8, reruns = $9, board_seconds = $10, wall_seconds = $11 \
                 WHERE id = $1",
                &args,
            )?;
            if changed == 0 {
                return Err(unknown_run(db, id));
            }
            for pin in pins {
                let mut args = vec![
                    Arg::text(id),
                    Arg::int(pin.channel),
                    Arg::text(&pin.verdict),
                    Arg::opt_text(pin.reason.as_deref()),
                ];
                args.extend(f64_args(&pin.source_ohms));
                args.extend(f64_args(&pin.node_farads));
                args.extend(f64_args(&[pin.source_volts, pin.noise_lsb_rms, pin.min_sample_ns]));
                args.push(json(&pin.flags));
                let changed = db.execute(
                    "UPDATE pins SET verdict = $3, reason = $4, source_ohms = $5, source_ohms_low = $6, \
                     source_ohms_high = $7, node_farads = $8, node_farads_low = $9, node_farads_high = $10, \
                     source_volts = $11, noise_lsb_rms = $12, min_sample_ns = $13, flags = $14 \
                     WHERE run_id = $1 AND channel = $2",
                    &args,
                )?;
                if changed == 0 {
                    return Err(StoreError::UnknownPin { id: id.to_string(), channel: pin.channel });
                }
            }
            Ok(())
        })
    }

    fn load_run(&mut self, id: &str) -> Result<RunRecord, StoreError> {
        read(&mut self.db, &format!("reading run {id}"), |db| {
            let full = resolve(db, id)?;
            load_record(db, &full)
        })
    }

    fn load_summaries(&mut self, id: &str) -> Result<Vec<PinSummary>, StoreError> {
        read(&mut self.db, &format!("reading the results of run {id}"), |db| {
            let full = resolve(db, id)?;
            let rows = db.query(
                "SELECT channel, verdict, reason, source_ohms, source_ohms_low, source_ohms_high, node_farads, \
                 node_farads_low, node_farads_high, source_volts, noise_lsb_rms, min_sample_ns, flags \
                 FROM pins WHERE run_id = $1 AND verdict IS NOT NULL ORDER BY ordinal",
                &[Arg::text(&full)],
            )?;
            rows.iter()
                .map(|row| {
                    let mut c = Cols::new(&full, "pins", row);
                    Ok(PinSummary {
                        channel: c.int()?,
                        verdict: c.text()?,
                        reason: c.opt_text()?,
                        source_ohms: [c.opt_f64()?, c.opt_f64()?, c.opt_f64()?],
                        node_farads: [c.opt_f64()?, c.opt_f64()?, c.opt_f64()?],
                        source_volts: c.opt_f64()?,
                        noise_lsb_rms: c.opt_f64()?,
                        min_sample_ns: c.opt_f64()?,
                        flags: c.json()?,
                    })
                })
                .collect()
        })
    }

    fn load_board(&mut self, id: &str) -> Result<BoardRecord, StoreError> {
        read(&mut self.db, &format!("reading the board of run {id}"), |db| {
            let full = resolve(db, id)?;
            Ok(load_head(db, &full)?.1)
        })
    }

    fn list_runs(&mut self, filter: &RunFilter) -> Result<Vec<RunListing>, StoreError> {
        let (clause, args) = filter_clause(filter)?;
        read(&mut self.db, "listing runs", |db| {
            let rows = db.query(
                &format!(
                    "SELECT r.id, r.kind, r.started, r.finished, r.board, r.unit_id, r.complete, r.fault, \
                     (SELECT COUNT(*) FROM pins p WHERE p.run_id = r.id), \
                     (SELECT COUNT(*) FROM experiments e WHERE e.run_id = r.id) \
                     FROM runs r {clause} ORDER BY r.started, r.id"
                ),
                &args,
            )?;
            let mut listings = Vec::with_capacity(rows.len());
            let mut index = BTreeMap::new();
            for row in &rows {
                let id = Cols::new("(listing)", "runs", row).text()?;
                let mut c = Cols::new(&id, "runs", row);
                c.next()?;
                let kind_name = c.text()?;
                let kind = RunKind::parse(&kind_name)
                    .ok_or_else(|| c.corrupt(&format!("unknown kind of run {kind_name:?}")))?;
                index.insert(id.clone(), listings.len());
                listings.push(RunListing {
                    id: id.clone(),
                    kind,
                    started: c.text()?,
                    finished: c.opt_text()?,
                    board: c.text()?,
                    unit_id: c.text()?,
                    complete: c.bool()?,
                    fault: c.opt_text()?,
                    pins: c.int()?,
                    experiments: c.int()?,
                    verdicts: BTreeMap::new(),
                });
            }
            let verdicts = db.query(
                &format!(
                    "SELECT p.run_id, p.verdict, COUNT(*) FROM pins p JOIN runs r ON r.id = p.run_id \
                     {clause} AND p.verdict IS NOT NULL GROUP BY p.run_id, p.verdict"
                ),
                &args,
            )?;
            for row in &verdicts {
                let mut c = Cols::new("(listing)", "pins", row);
                let id = c.text()?;
                let verdict = c.text()?;
                let count = c.int()?;
                if let Some(&at) = index.get(&id) {
                    listings[at].verdicts.insert(verdict, count);
                }
            }
            Ok(listings)
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn since_is_normalised_to_the_stored_form() {
        assert_eq!(since_text("2026-12-03T03:06:28Z").unwrap(), "2026-12-03T03:06:28.000Z");
        assert_eq!(since_text("2026-12-03T04:06:28.5+01:00").unwrap(), "2026-12-03T03:06:28.500Z");
        // Rounded up, so a run started before the given instant never matches.
        assert_eq!(since_text("2026-12-03T03:06:28.1231Z").unwrap(), "2026-12-03T03:06:28.124Z");
        assert_eq!(since_text("2026-12-03").unwrap(), "2026-12-03T00:00:00.000Z");
        assert!(matches!(since_text("yesterday"), Err(StoreError::BadTime { .. })));
    }

    #[test]
    fn like_patterns_escape_wildcards() {
        assert_eq!(like_escaped(r"a%b_c\d"), r"a\%b\_c\\d");
    }

    #[test]
    fn run_columns_are_distinct() {
        assert_eq!(RUN_COLUMNS.iter().collect::<std::collections::BTreeSet<_>>().len(), RUN_COLUMNS.len());
    }
}
