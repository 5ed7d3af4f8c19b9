//! Databases for the store tests: a SQLite file in a temporary folder, or a fresh schema on a
//! PostgreSQL server — the one `OHMSIGHT_TEST_POSTGRES` names, else a private throwaway server
//! started once for this test binary and stopped when it exits.

use ohmsight::store::{self, DbUrl, Store};
use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::sync::atomic::{AtomicBool, AtomicU32, Ordering};
use std::sync::{Mutex, OnceLock};
use std::time::{Duration, Instant};

/// `mod NAME { fn sqlite(); fn postgres(); }` running the body `fn NAME(&TestDb)` on each
/// backend, for a test binary with `#[macro_use] mod store_support;` (the PostgreSQL half skips,
/// loudly, where there is no server). Not every test binary that shares this module uses it.
#[allow(unused_macros)]
macro_rules! on_both_backends {
    ($($name:ident),* $(,)?) => {$(
        mod $name {
            #[test]
            fn sqlite() {
                super::$name(&crate::store_support::sqlite());
            }
            #[test]
            fn postgres() {
                if let Some(db) = crate::store_support::postgres() {
                    super::$name(&db);
                }
            }
        }
    )*};
}

/// The environment variable naming a PostgreSQL server for the tests (a `postgres://` URL whose
/// user may create schemas in its database).
pub const POSTGRES_ENV: &str = "OHMSIGHT_TEST_POSTGRES";

/// A database for one test; dropped, it is deleted.
pub struct TestDb {
    /// Where it is.
    pub url: DbUrl,
    /// `sqlite` or `postgres`.
    pub backend: &'static str,
    /// The SQLite file's folder.
    _dir: Option<tempfile::TempDir>,
    /// The PostgreSQL schema and the server's base URL.
    schema: Option<(String, String)>,
}

impl TestDb {
    /// A new connection through the store.
    pub fn open(&self) -> Box<dyn Store> {
        store::open(&self.url).unwrap_or_else(|e| panic!("opening {}: {e}", self.url.describe()))
    }

    /// Runs SQL statements directly, outside the store.
    pub fn exec(&self, sql: &str) {
        match &self.url {
            DbUrl::Sqlite(path) => rusqlite::Connection::open(path).unwrap().execute_batch(sql).unwrap(),
            DbUrl::Postgres(url) => {
                postgres::Client::connect(url, postgres::NoTls).unwrap().batch_execute(sql).unwrap()
            }
        }
    }

    /// The first column of every row of a query run directly, as text (NULL as `NULL`); the query
    /// casts what it selects to text so both backends read it alike.
    pub fn texts(&self, sql: &str) -> Vec<String> {
        match &self.url {
            DbUrl::Sqlite(path) => {
                let conn = rusqlite::Connection::open(path).unwrap();
                let mut statement = conn.prepare(sql).unwrap();
                let rows = statement
                    .query_map([], |row| row.get::<_, Option<String>>(0))
                    .unwrap()
                    .map(|r| r.unwrap().unwrap_or_else(|| "NULL".into()))
                    .collect();
                rows
            }
            DbUrl::Postgres(url) => postgres::Client::connect(url, postgres::NoTls)
                .unwrap()
                .query(sql, &[])
                .unwrap()
                .iter()
                .map(|row| row.get::<_, Option<String>>(0).unwrap_or_else(|| "NULL".into()))
                .collect(),
        }
    }
}

impl Drop for TestDb {
    fn drop(&mut self) {
        if let Some((schema, base)) = &self.schema {
            if let Ok(mut client) = postgres::Client::connect(base, postgres::NoTls) {
                let _ = client.batch_execute(&format!("DROP SCHEMA IF EXISTS {schema} CASCADE"));
            }
        }
    }
}

/// A fresh SQLite database file.
pub fn sqlite() -> TestDb {
    let dir = tempfile::Builder::new().prefix("ohmsight-store-").tempdir().unwrap();
    let url = DbUrl::Sqlite(dir.path().join("runs.db"));
    TestDb { url, backend: "sqlite", _dir: Some(dir), schema: None }
}

/// A fresh schema on the test server, or `None` (after saying so loudly) when there is no
/// PostgreSQL here; under CI (`CI` set) a missing server fails the test instead.
pub fn postgres() -> Option<TestDb> {
    let base = match server() {
        Ok(base) => base.clone(),
        Err(why) => {
            if std::env::var_os("CI").is_some() {
                panic!(
                    "PostgreSQL is needed for the store tests under CI, and none could be had: {why}\n\
                     Install it (apt-get install postgresql) or set {POSTGRES_ENV}=postgres://USER@HOST:PORT/DB"
                );
            }
            // Once, and past the test harness's capture (which holds back a passing test's
            // output), so it is seen.
            static SAID: AtomicBool = AtomicBool::new(false);
            if !SAID.swap(true, Ordering::Relaxed) {
                let _ = writeln!(
                    std::io::stderr(),
                    "\n*** SKIPPED: PostgreSQL not installed (apt-get install postgresql), or set {POSTGRES_ENV}; \
                     the store tests ran on SQLite only. ({why})\n"
                );
            }
            return None;
        }
    };
    static NEXT: AtomicU32 = AtomicU32::new(0);
    let nanos = std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).unwrap_or_default().subsec_nanos();
    let schema = format!("ohmsight_test_{}_{}_{nanos}", std::process::id(), NEXT.fetch_add(1, Ordering::Relaxed));
    let mut client = postgres::Client::connect(&base, postgres::NoTls)
        .unwrap_or_else(|e| panic!("connecting to the test server {}: {e}", DbUrl::Postgres(base.clone())));
    client.batch_execute(&format!("CREATE SCHEMA {schema}")).unwrap();
    // The store's connections see only this schema: the URL sets their search_path.
    let separator = if base.contains('?') { '&' } else { '?' };
    let url = format!("{base}{separator}options=-c%20search_path%3D{schema}");
    Some(TestDb { url: DbUrl::Postgres(url), backend: "postgres", _dir: None, schema: Some((schema, base)) })
}

/// The server's base URL: `OHMSIGHT_TEST_POSTGRES`, else a private server started once.
fn server() -> &'static Result<String, String> {
    static SERVER: OnceLock<Result<String, String>> = OnceLock::new();
    SERVER.get_or_init(|| match std::env::var(POSTGRES_ENV) {
        Ok(url) if !url.trim().is_empty() => Ok(url.trim().to_string()),
        _ => start_private(),
    })
}

/// What the exit hook stops: the server's folder, and how to run its tools.
struct Private {
    dir: PathBuf,
    bin: PathBuf,
    as_postgres: bool,
}

static PRIVATE: Mutex<Option<Private>> = Mutex::new(None);

/// A command for one of the server's tools, through `runuser -u postgres` when we are root
/// (PostgreSQL refuses to run as root).
fn tool(bin: &Path, name: &str, as_postgres: bool) -> Command {
    if as_postgres {
        let mut c = Command::new("runuser");
        // From a folder the postgres user may enter (the work tree may be in root's home).
        c.args(["-u", "postgres", "--"]).arg(bin.join(name)).current_dir(std::env::temp_dir());
        c
    } else {
        Command::new(bin.join(name))
    }
}

/// The folder holding `initdb` and `pg_ctl`: on the PATH, else the newest
/// `/usr/lib/postgresql/*/bin` (where Debian puts them).
fn find_bin() -> Option<PathBuf> {
    let has_both = |dir: &Path| dir.join("initdb").is_file() && dir.join("pg_ctl").is_file();
    if let Some(path) = std::env::var_os("PATH") {
        if let Some(dir) = std::env::split_paths(&path).find(|d| has_both(d)) {
            return Some(dir);
        }
    }
    let mut versions: Vec<(u32, PathBuf)> = std::fs::read_dir("/usr/lib/postgresql")
        .ok()?
        .filter_map(|e| e.ok())
        .filter_map(|e| Some((e.file_name().to_str()?.parse::<u32>().ok()?, e.path().join("bin"))))
        .filter(|(_, bin)| has_both(bin))
        .collect();
    versions.sort();
    versions.pop().map(|(_, bin)| bin)
}

fn output_text(o: &std::process::Output) -> String {
    format!("{}{}", String::from_utf8_lossy(&o.stdout), String::from_utf8_lossy(&o.stderr)).trim().to_string()
}

extern "C" fn stop_private_at_exit() {
    stop_private();
}

/// Stops the private server at once and deletes its folder.
fn stop_private() {
    let Ok(mut guard) = PRIVATE.lock() else { return };
    if let Some(p) = guard.take() {
        let _ = tool(&p.bin, "pg_ctl", p.as_postgres)
            .args(["stop", "-m", "immediate", "-w", "-D"])
            .arg(p.dir.join("data"))
            .stdin(Stdio::null())
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .status();
        let _ = std::fs::remove_dir_all(&p.dir);
    }
}

/// Starts a private server: a cluster in a temporary folder with trust authentication,
/// listening on 127.0.0.1 at a free port and on a socket inside the folder. It is stopped when
/// this process exits (an exit hook), and by a watchdog process should this one be killed.
fn start_private() -> Result<String, String> {
    let bin = find_bin().ok_or("no initdb and pg_ctl on the PATH or in /usr/lib/postgresql/*/bin")?;
    // SAFETY: geteuid has no preconditions.
    let root = unsafe { libc::geteuid() } == 0;
    if root && Command::new("id").args(["-u", "postgres"]).output().map_or(true, |o| !o.status.success()) {
        return Err("running as root, and there is no `postgres` user to run the server as".into());
    }
    let dir = tempfile::Builder::new()
        .prefix("ohmsight-pg-")
        .tempdir()
        .map_err(|e| format!("no temporary folder: {e}"))?
        .keep();
    if root {
        let o = Command::new("chown").args(["-R", "postgres:"]).arg(&dir).output().map_err(|e| e.to_string())?;
        if !o.status.success() {
            return Err(format!("chown of {} to postgres failed: {}", dir.display(), output_text(&o)));
        }
    }
    let data = dir.join("data");
    let socket = dir.join("sock");
    std::fs::create_dir_all(&socket).map_err(|e| e.to_string())?;
    if root {
        let _ = Command::new("chown").args(["postgres:"]).arg(&socket).status();
    }
    let init = tool(&bin, "initdb", root)
        .args(["-A", "trust", "-U", "ohmsight", "-E", "UTF8", "--locale=C", "--no-sync", "-D"])
        .arg(&data)
        .stdin(Stdio::null())
        .output()
        .map_err(|e| format!("could not run initdb: {e}"))?;
    if !init.status.success() {
        let _ = std::fs::remove_dir_all(&dir);
        return Err(format!("initdb failed: {}", output_text(&init)));
    }
    *PRIVATE.lock().unwrap() = Some(Private { dir: dir.clone(), bin: bin.clone(), as_postgres: root });
    // SAFETY: registers a plain function without arguments to run at exit.
    unsafe { libc::atexit(stop_private_at_exit) };
    spawn_watchdog(&bin, &dir, root);
    let mut last = String::new();
    for _ in 0..3 {
        let port = std::net::TcpListener::bind("127.0.0.1:0")
            .and_then(|l| l.local_addr())
            .map_err(|e| format!("no free port: {e}"))?
            .port();
        let options = format!(
            "-c listen_addresses=127.0.0.1 -p {port} -k {} -c fsync=off -c synchronous_commit=off \
             -c full_page_writes=off -c max_connections=80",
            socket.display()
        );
        let start = tool(&bin, "pg_ctl", root)
            .args(["start", "-w", "-t", "60", "-o", &options, "-l"])
            .arg(dir.join("server.log"))
            .arg("-D")
            .arg(&data)
            .stdin(Stdio::null())
            .output()
            .map_err(|e| format!("could not run pg_ctl: {e}"))?;
        if start.status.success() {
            let url = format!("postgres://ohmsight@127.0.0.1:{port}/postgres");
            let deadline = Instant::now() + Duration::from_secs(30);
            loop {
                match postgres::Client::connect(&url, postgres::NoTls) {
                    Ok(_) => return Ok(url),
                    Err(e) if Instant::now() > deadline => return Err(format!("the server does not answer: {e}")),
                    Err(_) => std::thread::sleep(Duration::from_millis(100)),
                }
            }
        }
        last = format!(
            "{}; log: {}",
            output_text(&start),
            std::fs::read_to_string(dir.join("server.log")).unwrap_or_default().trim()
        );
    }
    stop_private();
    Err(format!("pg_ctl start failed: {last}"))
}

/// A process that stops the server should this test binary die without running its exit hook
/// (killed): it polls for our pid, in its own process group so a terminal's Ctrl-C leaves it be.
fn spawn_watchdog(bin: &Path, dir: &Path, root: bool) {
    use std::os::unix::process::CommandExt;
    let pg_ctl = bin.join("pg_ctl");
    let stop = if root {
        format!("runuser -u postgres -- '{}' stop -m immediate -D '{}/data'", pg_ctl.display(), dir.display())
    } else {
        format!("'{}' stop -m immediate -D '{}/data'", pg_ctl.display(), dir.display())
    };
    let script = format!(
        "cd /; while kill -0 {pid} 2>/dev/null; do sleep 0.5; done; \
         if [ -d '{dir}' ]; then {stop}; rm -rf '{dir}'; fi",
        pid = std::process::id(),
        dir = dir.display(),
    );
    let _ = Command::new("sh")
        .args(["-c", &script])
        .stdin(Stdio::null())
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .process_group(0)
        .spawn();
}
