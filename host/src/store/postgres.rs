//! The PostgreSQL backend (the synchronous client, no TLS): one server shared by a factory's
//! stations. Statements are prepared once per connection; migrations hold an advisory lock.

use super::backend::{Arg, Db, Dialect, Val};
use super::sqlite::statement_head;
use super::StoreError;
use postgres::error::SqlState;
use postgres::types::{ToSql, Type};
use postgres::{Client, Config, NoTls, Row, Statement};
use std::collections::HashMap;
use std::time::Duration;

/// The advisory lock key that serialises migrations ("ohmsight" in ASCII).
const MIGRATION_LOCK: i64 = 0x6f68_6d73_6967_6874;

/// Prepared statements kept per connection (statement texts are few; multi-row inserts vary).
const STATEMENT_CACHE: usize = 256;

/// A connection to a PostgreSQL database.
pub(crate) struct Postgres {
    client: Client,
    describe: String,
    statements: HashMap<String, Statement>,
}

/// `PostgreSQL database D on HOST:PORT as user U`, never the password.
pub(crate) fn describe_config(config: &Config) -> String {
    let ports = config.get_ports();
    let hosts: Vec<String> = config
        .get_hosts()
        .iter()
        .enumerate()
        .map(|(i, host)| {
            let name = match host {
                postgres::config::Host::Tcp(name) => name.clone(),
                #[cfg(unix)]
                postgres::config::Host::Unix(path) => path.display().to_string(),
            };
            let port = ports.get(i).or(ports.first()).copied().unwrap_or(5432);
            format!("{name}:{port}")
        })
        .collect();
    let mut text = format!("PostgreSQL database {}", config.get_dbname().or(config.get_user()).unwrap_or("(default)"));
    if !hosts.is_empty() {
        text.push_str(&format!(" on {}", hosts.join(", ")));
    }
    if let Some(user) = config.get_user() {
        text.push_str(&format!(" as user {user}"));
    }
    text
}

impl Postgres {
    /// Connects (10 s connection timeout unless the URL sets one).
    pub fn connect(url: &str, describe: String) -> Result<Postgres, StoreError> {
        let mut config: Config = url.parse().map_err(|e: postgres::Error| StoreError::BadUrl {
            text: describe.clone(),
            why: format!("not a valid PostgreSQL URL ({e})"),
        })?;
        if config.get_connect_timeout().is_none() {
            config.connect_timeout(Duration::from_secs(10));
        }
        if config.get_application_name().is_none() {
            config.application_name("ohmsight");
        }
        let client = config
            .connect(NoTls)
            .map_err(|e| StoreError::Unreachable { database: describe.clone(), detail: error_text(&e) })?;
        Ok(Postgres { client, describe, statements: HashMap::new() })
    }

    fn error(&self, e: &postgres::Error, sql: &str) -> StoreError {
        let database = self.describe.clone();
        let lost = e.is_closed()
            || self.client.is_closed()
            || e.code().is_some_and(|c| {
                c.code().starts_with("08") || *c == SqlState::ADMIN_SHUTDOWN || *c == SqlState::CRASH_SHUTDOWN
            });
        if lost {
            StoreError::Unreachable { database, detail: error_text(e) }
        } else {
            StoreError::Query {
                database,
                action: "running a statement".into(),
                detail: format!("{} (in `{}`)", error_text(e), statement_head(sql)),
            }
        }
    }

    fn statement(&mut self, sql: &str) -> Result<Statement, StoreError> {
        if let Some(statement) = self.statements.get(sql) {
            return Ok(statement.clone());
        }
        let statement = self.client.prepare(sql).map_err(|e| self.error(&e, sql))?;
        if self.statements.len() >= STATEMENT_CACHE {
            self.statements.clear();
        }
        self.statements.insert(sql.to_string(), statement.clone());
        Ok(statement)
    }

    fn run<T>(
        &mut self,
        sql: &str,
        args: &[Arg],
        f: impl FnOnce(&mut Client, &Statement, &[&(dyn ToSql + Sync)]) -> Result<T, postgres::Error>,
    ) -> Result<T, StoreError> {
        let statement = self.statement(sql)?;
        let boxed: Vec<Box<dyn ToSql + Sync>> =
            args.iter().zip(statement.params()).map(|(arg, ty)| param(arg, ty)).collect();
        let refs: Vec<&(dyn ToSql + Sync)> = boxed.iter().map(|b| b.as_ref()).collect();
        f(&mut self.client, &statement, &refs).map_err(|e| self.error(&e, sql))
    }
}

/// The client's words, with the server's detail when there is one.
fn error_text(e: &postgres::Error) -> String {
    match e.as_db_error() {
        Some(db) => match db.detail() {
            Some(detail) => format!("{}: {} ({detail})", db.severity(), db.message()),
            None => format!("{}: {}", db.severity(), db.message()),
        },
        None => e.to_string(),
    }
}

/// A parameter in the type the server expects for it (every integer column is BIGINT, but a
/// function argument may want an INT4).
fn param(arg: &Arg, ty: &Type) -> Box<dyn ToSql + Sync> {
    match arg {
        Arg::Int(v) if *ty == Type::INT4 => Box::new(v.and_then(|v| i32::try_from(v).ok())),
        Arg::Int(v) if *ty == Type::FLOAT8 => Box::new(v.map(|v| v as f64)),
        Arg::Int(v) => Box::new(*v),
        Arg::Real(v) => Box::new(*v),
        Arg::Text(v) => Box::new(v.clone()),
        Arg::Bool(b) => Box::new(*b),
    }
}

fn values(row: &Row) -> Result<Vec<Val>, postgres::Error> {
    let mut out = Vec::with_capacity(row.len());
    for (i, column) in row.columns().iter().enumerate() {
        let ty = column.type_();
        let value = if *ty == Type::INT8 {
            row.try_get::<_, Option<i64>>(i)?.map(Val::Int)
        } else if *ty == Type::INT4 {
            row.try_get::<_, Option<i32>>(i)?.map(|v| Val::Int(v.into()))
        } else if *ty == Type::INT2 {
            row.try_get::<_, Option<i16>>(i)?.map(|v| Val::Int(v.into()))
        } else if *ty == Type::FLOAT8 {
            row.try_get::<_, Option<f64>>(i)?.map(Val::Real)
        } else if *ty == Type::FLOAT4 {
            row.try_get::<_, Option<f32>>(i)?.map(|v| Val::Real(v.into()))
        } else if *ty == Type::BOOL {
            row.try_get::<_, Option<bool>>(i)?.map(Val::Bool)
        } else {
            // TEXT, VARCHAR, NAME, …: anything else is read as text (and fails if it is not).
            row.try_get::<_, Option<String>>(i)?.map(Val::Text)
        };
        out.push(value.unwrap_or(Val::Null));
    }
    Ok(out)
}

impl Db for Postgres {
    fn describe(&self) -> String {
        self.describe.clone()
    }

    fn dialect(&self) -> Dialect {
        Dialect::Postgres
    }

    fn batch(&mut self, sql: &str) -> Result<(), StoreError> {
        self.client.batch_execute(sql).map_err(|e| self.error(&e, sql))
    }

    fn execute(&mut self, sql: &str, args: &[Arg]) -> Result<u64, StoreError> {
        self.run(sql, args, |client, statement, params| client.execute(statement, params))
    }

    fn query(&mut self, sql: &str, args: &[Arg]) -> Result<Vec<Vec<Val>>, StoreError> {
        self.run(sql, args, |client, statement, params| {
            client.query(statement, params)?.iter().map(values).collect::<Result<Vec<_>, _>>()
        })
    }

    fn begin_write(&mut self) -> Result<(), StoreError> {
        self.batch("BEGIN")
    }

    fn begin_read(&mut self) -> Result<(), StoreError> {
        // One snapshot for the whole read: a run being written elsewhere is seen as of one commit.
        self.batch("BEGIN ISOLATION LEVEL REPEATABLE READ, READ ONLY")
    }

    fn commit(&mut self) -> Result<(), StoreError> {
        self.batch("COMMIT")
    }

    fn rollback(&mut self) {
        let _ = self.client.batch_execute("ROLLBACK");
    }

    fn lock_schema(&mut self) -> Result<(), StoreError> {
        self.execute("SELECT pg_advisory_lock($1)", &[Arg::Int(Some(MIGRATION_LOCK))]).map(|_| ())
    }

    fn unlock_schema(&mut self) {
        let _ = self.execute("SELECT pg_advisory_unlock($1)", &[Arg::Int(Some(MIGRATION_LOCK))]);
    }
}
