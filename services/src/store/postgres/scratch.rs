//! A database of its own on a PostgreSQL server, dropped when done: for tests and benchmarks
//! that must not share tables (each creates one on the server their environment names).
//! Usable from async tests: the blocking client calls leave the async worker first.

use crate::store::{StoreError, StoreResult};

/// A database created on a server for one test, dropped (connections and all) on drop.
pub struct ScratchDatabase {
    admin_url: String,
    name: String,
    /// The URL of the new database.
    pub url: String,
}

impl ScratchDatabase {
    /// Creates a database with a fresh name on the server of `admin_url`, whose user may
    /// create databases (`admin_url` names any database of that server, e.g. `postgres`).
    pub fn create(admin_url: &str, prefix: &str) -> StoreResult<Self> {
        static CREATED: std::sync::atomic::AtomicU32 = std::sync::atomic::AtomicU32::new(0);
        let serial = CREATED.fetch_add(1, std::sync::atomic::Ordering::SeqCst);
        let name = format!("{prefix}_{}_{serial}_{:06x}", std::process::id(), rand::random::<u32>() & 0xff_ffff);
        if !name.chars().all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '_') {
            return Err(StoreError::Engine(format!("'{prefix}' is not a plain lowercase database name prefix")));
        }
        super::off_async(|| {
            let mut admin = ::postgres::Client::connect(admin_url, ::postgres::NoTls)
                .map_err(|e| StoreError::Engine(format!("connecting to {}: {}", super::redacted(admin_url), super::describe(&e))))?;
            admin.batch_execute(&format!("CREATE DATABASE {name}"))?;
            StoreResult::Ok(())
        })?;
        Ok(Self { url: url_with_database(admin_url, &name), admin_url: admin_url.to_owned(), name })
    }
}

/// Environment variable naming the PostgreSQL server tests may create databases on.
pub const TEST_SERVER_VARIABLE: &str = "BRAKELEDGER_TEST_POSTGRES_URL";

impl ScratchDatabase {
    /// A database of its own for one test (named `prefix`_…), on the server named by
    /// `BRAKELEDGER_TEST_POSTGRES_URL`; `None` with a message on how to run the test when it is
    /// not set, and a failure instead when `BRAKELEDGER_REQUIRE_POSTGRES=1` (as in CI).
    pub fn for_test(prefix: &str) -> Option<Self> {
        let Some(admin_url) = std::env::var(TEST_SERVER_VARIABLE).ok().filter(|u| !u.is_empty()) else {
            assert!(
                std::env::var("BRAKELEDGER_REQUIRE_POSTGRES").as_deref() != Ok("1"),
                "BRAKELEDGER_REQUIRE_POSTGRES=1 but {TEST_SERVER_VARIABLE} is not set: .ci/run starts a throwaway PostgreSQL and sets it"
            );
            eprintln!(
                "PostgreSQL test skipped: set {TEST_SERVER_VARIABLE}=postgres://USER@127.0.0.1:PORT/postgres (a server where tests may \
                 create databases; `bash .ci/run` starts one) to run it"
            );
            return None;
        };
        Some(Self::create(&admin_url, prefix).unwrap_or_else(|e| panic!("creating a test database on {TEST_SERVER_VARIABLE}: {e}")))
    }
}

/// `admin_url` with its database replaced by `name` (URL form or key=value form).
pub fn url_with_database(admin_url: &str, name: &str) -> String {
    let Some(scheme_end) = admin_url.find("://").map(|i| i + 3) else {
        return format!("{admin_url} dbname={name}");
    };
    let (base, query) = admin_url.split_once('?').map_or((admin_url, None), |(b, q)| (b, Some(q)));
    let path_start = base[scheme_end..].find('/').map_or(base.len(), |i| scheme_end + i);
    let mut url = format!("{}/{name}", &base[..path_start]);
    if let Some(query) = query {
        url.push('?');
        url.push_str(query);
    }
    url
}

impl Drop for ScratchDatabase {
    fn drop(&mut self) {
        super::off_async(|| {
            if let Ok(mut admin) = ::postgres::Client::connect(&self.admin_url, ::postgres::NoTls) {
                let _ = admin.batch_execute(&format!("DROP DATABASE IF EXISTS {} WITH (FORCE)", self.name));
            }
        });
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_database_is_replaced_in_either_form() {
        assert_eq!(url_with_database("postgres://u@127.0.0.1:5432/postgres", "t1"), "postgres://u@127.0.0.1:5432/t1");
        assert_eq!(url_with_database("postgres://u@127.0.0.1:5432", "t1"), "postgres://u@127.0.0.1:5432/t1");
        assert_eq!(url_with_database("postgresql://u@h/postgres?sslmode=disable", "t1"), "postgresql://u@h/t1?sslmode=disable");
        assert_eq!(url_with_database("host=/tmp user=u", "t1"), "host=/tmp user=u dbname=t1");
    }
}
