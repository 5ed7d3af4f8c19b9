//! The schema's migrations: SQL text embedded in the binary, applied in order, each recorded in
//! `schema_migrations`. The statements are the same on both backends except for markers
//! (`@NAME@`) that [`adapt`] fills in per dialect.

use super::backend::{read, write, Arg, Db, Dialect, Val};
use super::StoreError;
use std::collections::BTreeSet;

/// One step of the schema.
struct Migration {
    /// Its number; applied in increasing order.
    version: i64,
    /// What it does, in a word or two (stored beside the version).
    name: &'static str,
    /// The statements.
    sql: &'static str,
}

/// Every migration this tool knows, oldest first. Append only: a released migration never
/// changes, since databases in the field have run it.
const MIGRATIONS: &[Migration] = &[
    Migration { version: 1, name: "run records", sql: include_str!("migrations/0001_runs.sql") },
    Migration { version: 2, name: "board run reports", sql: include_str!("migrations/0002_board_report.sql") },
    Migration { version: 3, name: "check results", sql: include_str!("migrations/0003_checks.sql") },
    Migration { version: 4, name: "unit calibrations", sql: include_str!("migrations/0004_calibrations.sql") },
    Migration { version: 5, name: "pin opt-ins", sql: include_str!("migrations/0005_channel_opt_ins.sql") },
    Migration { version: 6, name: "pull profile", sql: include_str!("migrations/0006_pull_profile.sql") },
];

/// The newest schema version this tool reads and writes.
pub const SCHEMA_VERSION: i64 = 6;

/// The per-dialect markers and what they stand for.
fn markers(dialect: Dialect) -> &'static [(&'static str, &'static str)] {
    match dialect {
        Dialect::Sqlite => &[("@DOUBLE@", ""), ("@WITHOUT_ROWID@", "WITHOUT ROWID")],
        Dialect::Postgres => &[("@DOUBLE@", "DOUBLE PRECISION"), ("@WITHOUT_ROWID@", "")],
    }
}

/// A migration's text for one dialect.
fn adapt(sql: &str, dialect: Dialect) -> String {
    markers(dialect).iter().fold(sql.to_string(), |text, (marker, value)| text.replace(marker, value))
}

const CREATE_MIGRATIONS_TABLE: &str = "CREATE TABLE IF NOT EXISTS schema_migrations (\
     version BIGINT NOT NULL PRIMARY KEY, name TEXT NOT NULL, applied TEXT NOT NULL)";

/// The versions applied, or `None` when there is no `schema_migrations` table yet.
fn applied_versions<D: Db + ?Sized>(db: &mut D) -> Option<BTreeSet<i64>> {
    let rows =
        read(db, "reading the schema version", |db| db.query("SELECT version FROM schema_migrations", &[])).ok()?;
    Some(rows.iter().filter_map(|row| if let Some(Val::Int(v)) = row.first() { Some(*v) } else { None }).collect())
}

fn check_not_newer<D: Db + ?Sized>(db: &D, applied: &BTreeSet<i64>) -> Result<(), StoreError> {
    match applied.last() {
        Some(&found) if found > SCHEMA_VERSION => {
            Err(StoreError::SchemaTooNew { database: db.describe(), found, known: SCHEMA_VERSION })
        }
        _ => Ok(()),
    }
}

/// Brings the database to [`SCHEMA_VERSION`], or refuses one that is newer. Safe when several
/// processes open a fresh database at once: the check and the migrations run in one write
/// transaction under the backend's schema lock.
pub(crate) fn migrate<D: Db + ?Sized>(db: &mut D) -> Result<(), StoreError> {
    // The common case reads only, so opening a database that is up to date never waits for
    // writers.
    if let Some(applied) = applied_versions(db) {
        check_not_newer(db, &applied)?;
        if MIGRATIONS.iter().all(|m| applied.contains(&m.version)) {
            return Ok(());
        }
    }
    db.lock_schema().map_err(|e| e.during("locking the schema for migration"))?;
    let result = write(db, "migrating the schema", |db| {
        db.batch(CREATE_MIGRATIONS_TABLE)?;
        let applied: BTreeSet<i64> = db
            .query("SELECT version FROM schema_migrations", &[])?
            .iter()
            .filter_map(|row| if let Some(Val::Int(v)) = row.first() { Some(*v) } else { None })
            .collect();
        check_not_newer(db, &applied)?;
        for migration in MIGRATIONS.iter().filter(|m| !applied.contains(&m.version)) {
            db.batch(&adapt(migration.sql, db.dialect()))?;
            db.execute(
                "INSERT INTO schema_migrations (version, name, applied) VALUES ($1, $2, $3)",
                &[
                    Arg::Int(Some(migration.version)),
                    Arg::text(migration.name),
                    Arg::text(&crate::record::now_rfc3339()),
                ],
            )?;
        }
        Ok(())
    });
    db.unlock_schema();
    result
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn migrations_are_numbered_in_order_up_to_the_schema_version() {
        for (i, m) in MIGRATIONS.iter().enumerate() {
            assert_eq!(m.version, i as i64 + 1, "{}", m.name);
        }
        assert_eq!(MIGRATIONS.last().map(|m| m.version), Some(SCHEMA_VERSION));
    }

    #[test]
    fn every_marker_is_filled_in_on_both_dialects() {
        for m in MIGRATIONS {
            for dialect in [Dialect::Sqlite, Dialect::Postgres] {
                let text = adapt(m.sql, dialect);
                assert!(!text.contains('@'), "migration {} keeps a marker for {dialect:?}", m.version);
            }
        }
        // The statements without their comments.
        let code =
            |text: String| text.lines().map(|l| l.split("--").next().unwrap_or("")).collect::<Vec<_>>().join("\n");
        assert_eq!(code(adapt(MIGRATIONS[0].sql, Dialect::Sqlite)).matches(") WITHOUT ROWID;").count(), 2);
        assert!(!code(adapt(MIGRATIONS[0].sql, Dialect::Postgres)).contains("ROWID"));
    }
}
