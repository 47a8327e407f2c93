//! History write throughput (a bench binary): sessions written per second by 1 and by 4
//! concurrent writers, each with its own connection as four benches would have, into an SQLite
//! file and into a throwaway PostgreSQL cluster on a unix socket (fsync on, as a lab server
//! runs). One session = one run of the 49-site oxide recipe: its run row, one session row, one
//! layer's statistics and 49 site values, in one transaction.
//!
//! `cargo test --bench history` (dev profile) or `cargo bench --bench history` (release);
//! figures in docs/history.md.

#[path = "../tests/pg_common/mod.rs"]
mod pg_common;

use isopach::history::db::{
    History, LayerRecord, RunIdentity, RunRecord, SessionRecord, SiteRecord,
};
use isopach::history::location::HistoryLocation;
use std::time::Instant;

/// Sessions each writer sends.
const PER_WRITER: usize = 150;
const SITES: usize = 49;

/// Run `i` of bench `bench`, as a session's write sends it.
fn record(bench: usize, i: usize) -> RunRecord {
    let started = format!("2026-12-02T{:02}:{:02}:00+00:00", i / 60 % 24, i % 60);
    RunRecord {
        id: RunIdentity {
            bench: format!("bench-{bench}"),
            run_id: format!("20261202-{i:06}-W{i:03}"),
            folder: format!("/lab/bench-{bench}/runs/20261202-{i:06}-W{i:03}"),
            recipe: "oxide-150-49".into(),
            wafer: format!("W{i:03}"),
            lot: "L2612".into(),
            started: started.clone(),
            finished: started.clone(),
        },
        sessions: vec![SessionRecord {
            session: 1,
            command: "run".into(),
            started: started.clone(),
            ended: started,
            outcome: "finished".into(),
        }],
        layers: vec![LayerRecord {
            layer: 0,
            material: "sio2".into(),
            sites_total: SITES,
            sites_valid: SITES,
            mean_nm: 1000.0 + i as f64 * 0.01,
            std_nm: 4.2,
            min_nm: 992.0,
            max_nm: 1009.0,
            nu_1sigma_pct: 0.42,
            nu_range_pct: 0.85,
            spec_lo_nm: 950.0,
            spec_hi_nm: 1050.0,
        }],
        sites: (1..=SITES)
            .map(|s| SiteRecord {
                site: s,
                layer: 0,
                x_mm: s as f64,
                y_mm: -(s as f64),
                thickness_nm: 1000.0 + s as f64 * 0.1,
                valid: true,
            })
            .collect(),
    }
}

/// Sessions per second of `writers` concurrent writers into `at`.
async fn throughput(at: &HistoryLocation, writers: usize) -> f64 {
    // Migrated once before timing, as a lab's history is.
    drop(History::open(at).await.expect("open the history"));
    let start = Instant::now();
    let tasks: Vec<_> = (1..=writers)
        .map(|w| {
            let at = at.clone();
            tokio::spawn(async move {
                let mut h = History::open(&at).await.expect("open the history");
                for i in 0..PER_WRITER {
                    h.record(&record(w, i)).await.expect("write a session");
                }
            })
        })
        .collect();
    for t in tasks {
        t.await.expect("writer");
    }
    let secs = start.elapsed().as_secs_f64();
    let n = History::open(at).await.unwrap().runs().await.unwrap().len();
    assert_eq!(n, writers * PER_WRITER, "every session landed once");
    (writers * PER_WRITER) as f64 / secs
}

fn main() {
    let rt = tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()
        .unwrap();
    let dir = tempfile::tempdir().unwrap();
    let mut targets = vec![(
        "SQLite (WAL, one file)",
        vec![
            HistoryLocation::Sqlite(dir.path().join("one.sqlite")),
            HistoryLocation::Sqlite(dir.path().join("four.sqlite")),
        ],
    )];
    let pg = pg_common::cluster_or_skip("history bench (PostgreSQL)", true);
    if let Some(pg) = &pg {
        pg.create_db("one").unwrap();
        pg.create_db("four").unwrap();
        let at = |db| HistoryLocation::from_setting(Some(&pg.url(db)), dir.path()).unwrap();
        targets.push((
            "PostgreSQL (unix socket, fsync on)",
            vec![at("one"), at("four")],
        ));
    }
    println!("history writes, {SITES}-site sessions, {PER_WRITER} per writer:");
    for (name, at) in &targets {
        let one = rt.block_on(throughput(&at[0], 1));
        let four = rt.block_on(throughput(&at[1], 4));
        println!("  {name:<36} 1 writer {one:>7.0} sessions/s   4 writers {four:>7.0} sessions/s");
    }
}
