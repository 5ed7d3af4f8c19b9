//! The SQLite backend: one file, WAL mode, a long busy timeout and `BEGIN IMMEDIATE` writes, so
//! several processes can write their runs into one file while others read it.

use super::backend::{Arg, Db, Dialect, Val};
use super::StoreError;
use rusqlite::types::{Value, ValueRef};
use rusqlite::{Connection, ErrorCode, OpenFlags};
use std::path::Path;
use std::time::Duration;

/// How long a writer waits for another writer's transaction (a survey's are short; a stuck
/// process is reported after this).
const BUSY_TIMEOUT: Duration = Duration::from_secs(60);

/// A connection to a SQLite file.
pub(crate) struct Sqlite {
    conn: Connection,
    describe: String,
}

impl Sqlite {
    /// Opens (creating) the file and sets the connection up: busy timeout, WAL, foreign keys,
    /// full sync (a committed experiment survives a power cut too).
    pub fn open(path: &Path) -> Result<Sqlite, StoreError> {
        let describe = format!("SQLite file {}", path.display());
        let cannot_open = |e: rusqlite::Error| match classify(&e) {
            Class::Busy => StoreError::Busy { database: describe.clone(), detail: e.to_string() },
            _ => StoreError::CannotOpen { database: describe.clone(), detail: e.to_string() },
        };
        if path.is_dir() {
            return Err(StoreError::CannotOpen { database: describe, detail: "it is a folder".into() });
        }
        let flags = OpenFlags::SQLITE_OPEN_READ_WRITE | OpenFlags::SQLITE_OPEN_CREATE | OpenFlags::SQLITE_OPEN_NO_MUTEX;
        let conn = Connection::open_with_flags(path, flags).map_err(cannot_open)?;
        conn.busy_timeout(BUSY_TIMEOUT).map_err(cannot_open)?;
        conn.set_prepared_statement_cache_capacity(64);
        // The first statement reads the file: a file that is not a database fails here.
        // Switching a new file to WAL needs its exclusive lock, and SQLite answers "busy" at
        // once rather than through the busy handler when another process holds the file: so
        // several stations opening a fresh database at the same moment try again here.
        let since = std::time::Instant::now();
        let mode: String = loop {
            match conn.query_row("PRAGMA journal_mode = WAL", [], |row| row.get(0)) {
                Err(e) if matches!(classify(&e), Class::Busy) && since.elapsed() < BUSY_TIMEOUT => {
                    std::thread::sleep(std::time::Duration::from_millis(5));
                }
                other => break other.map_err(cannot_open)?,
            }
        };
        if !mode.eq_ignore_ascii_case("wal") {
            return Err(StoreError::CannotOpen {
                database: describe,
                detail: format!("it cannot be switched to write-ahead logging (journal mode stays {mode})"),
            });
        }
        conn.execute_batch("PRAGMA foreign_keys = ON; PRAGMA synchronous = FULL;").map_err(cannot_open)?;
        Ok(Sqlite { conn, describe })
    }

    fn error(&self, e: rusqlite::Error, sql: &str) -> StoreError {
        let database = self.describe.clone();
        match classify(&e) {
            Class::Busy => StoreError::Busy { database, detail: e.to_string() },
            Class::Unavailable => StoreError::CannotOpen { database, detail: e.to_string() },
            Class::Other => StoreError::Query {
                database,
                action: "running a statement".into(),
                detail: format!("{e} (in `{}`)", statement_head(sql)),
            },
        }
    }
}

enum Class {
    Busy,
    Unavailable,
    Other,
}

fn classify(e: &rusqlite::Error) -> Class {
    match e.sqlite_error_code() {
        Some(ErrorCode::DatabaseBusy | ErrorCode::DatabaseLocked) => Class::Busy,
        Some(
            ErrorCode::CannotOpen
            | ErrorCode::NotADatabase
            | ErrorCode::ReadOnly
            | ErrorCode::PermissionDenied
            | ErrorCode::DiskFull
            | ErrorCode::SystemIoFailure
            | ErrorCode::FileLockingProtocolFailed
            | ErrorCode::DatabaseCorrupt,
        ) => Class::Unavailable,
        _ => Class::Other,
    }
}

/// The first words of a statement, for error messages.
pub(crate) fn statement_head(sql: &str) -> String {
    let flat: String = sql.split_whitespace().collect::<Vec<_>>().join(" ");
    match flat.char_indices().nth(60) {
        Some((i, _)) => format!("{}…", &flat[..i]),
        None => flat,
    }
}

/// `$1` → `?1`: the statements are written with PostgreSQL's markers, which SQLite reads as
/// named parameters; `?NNN` is SQLite's numbered form.
fn numbered(sql: &str) -> String {
    let mut out = String::with_capacity(sql.len());
    let mut chars = sql.chars().peekable();
    while let Some(c) = chars.next() {
        if c == '$' && chars.peek().is_some_and(char::is_ascii_digit) {
            out.push('?');
        } else {
            out.push(c);
        }
    }
    out
}

fn value(arg: &Arg) -> Value {
    match arg {
        Arg::Int(Some(v)) => Value::Integer(*v),
        Arg::Real(Some(v)) => Value::Real(*v),
        Arg::Text(Some(v)) => Value::Text(v.clone()),
        Arg::Bool(b) => Value::Integer(i64::from(*b)),
        Arg::Int(None) | Arg::Real(None) | Arg::Text(None) => Value::Null,
    }
}

impl Db for Sqlite {
    fn describe(&self) -> String {
        self.describe.clone()
    }

    fn dialect(&self) -> Dialect {
        Dialect::Sqlite
    }

    fn batch(&mut self, sql: &str) -> Result<(), StoreError> {
        self.conn.execute_batch(sql).map_err(|e| self.error(e, sql))
    }

    fn execute(&mut self, sql: &str, args: &[Arg]) -> Result<u64, StoreError> {
        let text = numbered(sql);
        let run = || -> rusqlite::Result<usize> {
            let mut statement = self.conn.prepare_cached(&text)?;
            statement.execute(rusqlite::params_from_iter(args.iter().map(value)))
        };
        run().map(|n| n as u64).map_err(|e| self.error(e, sql))
    }

    fn query(&mut self, sql: &str, args: &[Arg]) -> Result<Vec<Vec<Val>>, StoreError> {
        let text = numbered(sql);
        let run = || -> rusqlite::Result<Vec<Vec<Val>>> {
            let mut statement = self.conn.prepare_cached(&text)?;
            let width = statement.column_count();
            let mut rows = statement.query(rusqlite::params_from_iter(args.iter().map(value)))?;
            let mut out = Vec::new();
            while let Some(row) = rows.next()? {
                let mut values = Vec::with_capacity(width);
                for i in 0..width {
                    values.push(match row.get_ref(i)? {
                        ValueRef::Null => Val::Null,
                        ValueRef::Integer(v) => Val::Int(v),
                        ValueRef::Real(v) => Val::Real(v),
                        ValueRef::Text(t) | ValueRef::Blob(t) => Val::Text(String::from_utf8_lossy(t).into_owned()),
                    });
                }
                out.push(values);
            }
            Ok(out)
        };
        run().map_err(|e| self.error(e, sql))
    }

    fn begin_write(&mut self) -> Result<(), StoreError> {
        // IMMEDIATE takes the write lock now, waiting up to the busy timeout; a deferred
        // transaction that reads first and then writes could fail at once instead.
        self.batch("BEGIN IMMEDIATE")
    }

    fn begin_read(&mut self) -> Result<(), StoreError> {
        self.batch("BEGIN DEFERRED")
    }

    fn commit(&mut self) -> Result<(), StoreError> {
        self.batch("COMMIT")
    }

    fn rollback(&mut self) {
        if !self.conn.is_autocommit() {
            let _ = self.conn.execute_batch("ROLLBACK");
        }
    }

    fn lock_schema(&mut self) -> Result<(), StoreError> {
        // The migration's BEGIN IMMEDIATE already excludes every other writer.
        Ok(())
    }

    fn unlock_schema(&mut self) {}
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn markers_are_renumbered_for_sqlite() {
        assert_eq!(numbered("SELECT $1, $12 FROM t WHERE a = '$x'"), "SELECT ?1, ?12 FROM t WHERE a = '$x'");
    }

    #[test]
    fn statement_heads_are_short() {
        assert_eq!(statement_head("SELECT  a\n  FROM t"), "SELECT a FROM t");
        assert!(statement_head(&"x ".repeat(100)).ends_with('…'));
    }
}
