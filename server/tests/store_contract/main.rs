//! The storage contract: the same cases run against SQLite (a real file) and
//! PostgreSQL (a fresh schema in the run's database, see `kinema_tests::db`).
//!
//! Each module holds the cases of one part of the [`Store`] trait and lists them once
//! in [`contract!`], which makes one test per case and backend.

mod alerts;
mod analyses;
mod batches;
mod jobs;
mod keys;
mod structures;
mod webhooks;

use kinema_server::store::{self, DynStore};
use kinema_tests::db::{PgSchema, sqlite_file};

/// A migrated store on one backend, and what keeps its database alive.
pub enum Db {
    /// SQLite file in a temporary folder.
    Sqlite(tempfile::TempDir),
    /// PostgreSQL schema.
    Postgres(PgSchema),
}

impl Db {
    /// Drop what the test made.
    pub async fn finish(self) {
        if let Self::Postgres(s) = self {
            s.drop_schema().await;
        }
    }
}

/// A migrated SQLite store in a fresh file.
pub async fn sqlite() -> (DynStore, Db) {
    let (url, dir) = sqlite_file();
    let s = store::open(&url).await.expect("open sqlite");
    s.migrate().await.expect("migrate sqlite");
    (s, Db::Sqlite(dir))
}

/// A migrated PostgreSQL store in a fresh schema.
pub async fn postgres(tag: &str) -> (DynStore, Db) {
    let schema = PgSchema::create(tag).await;
    let s = store::open(&schema.url).await.expect("open postgres");
    s.migrate().await.expect("migrate postgres");
    (s, Db::Postgres(schema))
}

/// `contract!(case, …)`: one `#[tokio::test]` per case on each backend, in modules
/// `sqlite` and `postgres`. A case is `async fn case(store: DynStore)`.
#[macro_export]
macro_rules! contract {
    ($($case:ident),* $(,)?) => {
        mod sqlite {
            $(
                #[tokio::test]
                async fn $case() {
                    let (store, db) = $crate::sqlite().await;
                    super::$case(store).await;
                    db.finish().await;
                }
            )*
        }
        mod postgres {
            $(
                #[tokio::test]
                async fn $case() {
                    let (store, db) = $crate::postgres(stringify!($case)).await;
                    super::$case(store).await;
                    db.finish().await;
                }
            )*
        }
    };
}
