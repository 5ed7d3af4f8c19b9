//! What the record mapping needs of a database, implemented once per backend: statements with
//! positional parameters (`$1`, `$2`, … in the SQL text), a handful of value types,
//! transactions, and a lock that serialises migrations between processes.

use super::StoreError;

/// A statement parameter. NULLs are typed, since PostgreSQL checks a parameter's type against
/// the column it goes to.
#[derive(Debug, Clone, PartialEq)]
pub(crate) enum Arg {
    /// A 64-bit integer (every integer column is BIGINT).
    Int(Option<i64>),
    /// A double (DOUBLE PRECISION columns).
    Real(Option<f64>),
    /// Text.
    Text(Option<String>),
    /// A boolean (BOOLEAN columns: `true`/`false` in PostgreSQL, 1/0 in SQLite).
    Bool(bool),
}

impl Arg {
    /// A u64 through its two's-complement i64 (read back with `Cols::u64` in the mapping).
    pub fn u64(v: u64) -> Arg {
        Arg::Int(Some(u64_to_i64(v)))
    }

    /// An optional u64, as [`Arg::u64`].
    pub fn opt_u64(v: Option<u64>) -> Arg {
        Arg::Int(v.map(u64_to_i64))
    }

    /// Any integer that fits an i64 losslessly.
    pub fn int(v: impl Into<i64>) -> Arg {
        Arg::Int(Some(v.into()))
    }

    /// Text.
    pub fn text(v: &str) -> Arg {
        Arg::Text(Some(v.to_string()))
    }

    /// Optional text.
    pub fn opt_text(v: Option<&str>) -> Arg {
        Arg::Text(v.map(str::to_string))
    }

    /// A double.
    pub fn real(v: f64) -> Arg {
        Arg::Real(Some(v))
    }
}

/// u64 → i64 keeping every bit (values from 2^63 on read as negative in SQL).
pub(crate) fn u64_to_i64(v: u64) -> i64 {
    i64::from_ne_bytes(v.to_ne_bytes())
}

/// i64 → u64, the inverse of [`u64_to_i64`].
pub(crate) fn i64_to_u64(v: i64) -> u64 {
    u64::from_ne_bytes(v.to_ne_bytes())
}

/// A value read back.
#[derive(Debug, Clone, PartialEq)]
pub(crate) enum Val {
    /// SQL NULL.
    Null,
    /// An integer.
    Int(i64),
    /// A double.
    Real(f64),
    /// Text.
    Text(String),
    /// A boolean (PostgreSQL; SQLite gives integers).
    Bool(bool),
}

/// Which database a backend talks to, where the SQL differs.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Dialect {
    /// SQLite.
    Sqlite,
    /// PostgreSQL.
    Postgres,
}

/// A connection to one database.
pub(crate) trait Db: Send {
    /// The database in words, without any password.
    fn describe(&self) -> String;
    /// Which SQL dialect it speaks.
    fn dialect(&self) -> Dialect;
    /// Runs statements without parameters, separated by `;` (migrations).
    fn batch(&mut self, sql: &str) -> Result<(), StoreError>;
    /// Runs one statement; the number of rows it changed.
    fn execute(&mut self, sql: &str, args: &[Arg]) -> Result<u64, StoreError>;
    /// Runs one query; its rows.
    fn query(&mut self, sql: &str, args: &[Arg]) -> Result<Vec<Vec<Val>>, StoreError>;
    /// Starts a write transaction (SQLite takes the write lock at once).
    fn begin_write(&mut self) -> Result<(), StoreError>;
    /// Starts a read transaction that sees one snapshot.
    fn begin_read(&mut self) -> Result<(), StoreError>;
    /// Commits the transaction.
    fn commit(&mut self) -> Result<(), StoreError>;
    /// Rolls the transaction back (errors ignored: the connection may be gone).
    fn rollback(&mut self);
    /// Serialises migrations with other processes until [`Db::unlock_schema`].
    fn lock_schema(&mut self) -> Result<(), StoreError>;
    /// Ends [`Db::lock_schema`].
    fn unlock_schema(&mut self);
}

/// Runs `f` in a write transaction: committed when it succeeds, rolled back when it fails.
pub(crate) fn write<D: Db + ?Sized, T>(
    db: &mut D,
    action: &str,
    f: impl FnOnce(&mut D) -> Result<T, StoreError>,
) -> Result<T, StoreError> {
    db.begin_write().map_err(|e| e.during(action))?;
    finish(db, action, f)
}

/// Runs `f` in a read transaction (one snapshot of the database).
pub(crate) fn read<D: Db + ?Sized, T>(
    db: &mut D,
    action: &str,
    f: impl FnOnce(&mut D) -> Result<T, StoreError>,
) -> Result<T, StoreError> {
    db.begin_read().map_err(|e| e.during(action))?;
    finish(db, action, f)
}

fn finish<D: Db + ?Sized, T>(
    db: &mut D,
    action: &str,
    f: impl FnOnce(&mut D) -> Result<T, StoreError>,
) -> Result<T, StoreError> {
    match f(db) {
        Ok(value) => match db.commit() {
            Ok(()) => Ok(value),
            Err(e) => {
                db.rollback();
                Err(e.during(action))
            }
        },
        Err(e) => {
            db.rollback();
            Err(e.during(action))
        }
    }
}

/// The most parameters one statement gets (SQLite allows 32766, PostgreSQL 65535).
const MAX_PARAMS: usize = 30_000;

/// Inserts rows into `table`: the first columns take the same `fixed` values in every row
/// (the run id, the experiment's seq), the others one `rows` entry each. As few statements as
/// the parameter limit allows.
pub(crate) fn insert_rows<D: Db + ?Sized>(
    db: &mut D,
    table: &str,
    columns: &[&str],
    fixed: &[Arg],
    rows: &[Vec<Arg>],
) -> Result<(), StoreError> {
    let per_row = columns.len() - fixed.len();
    if rows.is_empty() {
        return Ok(());
    }
    let rows_per_statement = ((MAX_PARAMS - fixed.len()) / per_row.max(1)).max(1);
    let fixed_marks: Vec<String> = (1..=fixed.len()).map(|i| format!("${i}")).collect();
    for chunk in rows.chunks(rows_per_statement) {
        let mut sql = format!("INSERT INTO {table} ({}) VALUES ", columns.join(", "));
        let mut args: Vec<Arg> = fixed.to_vec();
        for (r, row) in chunk.iter().enumerate() {
            debug_assert_eq!(row.len(), per_row);
            if r > 0 {
                sql.push_str(", ");
            }
            let mut marks = fixed_marks.clone();
            for value in row {
                args.push(value.clone());
                marks.push(format!("${}", args.len()));
            }
            sql.push('(');
            sql.push_str(&marks.join(", "));
            sql.push(')');
        }
        db.execute(&sql, &args)?;
    }
    Ok(())
}
