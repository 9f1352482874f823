//! One run lifecycle, the same for a check by hand (`samewise check`) and for the scheduler:
//! take the period's lease ([`acquire`]: or take it over from a holder on this host whose process
//! is gone); while holding it ([`holding`], which releases it on every path) the caller marks
//! runs left behind as failed, then [`run_period`] begins the run, computes it, checks that the
//! lease is still ours, and writes every result in one transaction or records the failure. The store is anything that implements [`RunStore`]; times come from the caller's
//! clock (milliseconds since the epoch, UTC), so nothing here reads the wall clock.

use crate::results::RunContent;
use crate::storage::runs::{LeaseKey, RunHeader, RunStatus, StoredRun};
use crate::storage::RunStore;
use crate::Result;

/// Whose lease, for how long.
#[derive(Debug, Clone)]
pub struct Lease<'a> {
    /// Schedule (`""` for a check by hand) and period.
    pub key: LeaseKey,
    /// This process (`host:pid:random`).
    pub holder: &'a str,
    /// Lifetime without a heartbeat, milliseconds.
    pub ttl_ms: i64,
}

/// The outcome of asking for a lease.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Acquired {
    /// The lease was free or expired, and is ours now.
    Taken,
    /// The lease was held by a process of this host that no longer exists; it is ours now.
    TookOver(String),
    /// Someone else holds the lease (their holder name).
    Held(String),
}

impl Acquired {
    /// Whether the lease is ours.
    pub fn is_ours(&self) -> bool {
        !matches!(self, Acquired::Held(_))
    }
}

/// Takes the lease, or takes it over from a holder on this host whose process is gone (any
/// doubt counts as alive: the lease then expires by itself).
pub fn acquire<S: RunStore + ?Sized>(
    store: &S,
    lease: &Lease<'_>,
    now_ms: i64,
) -> Result<Acquired> {
    if store.take_lease(&lease.key, lease.holder, now_ms, lease.ttl_ms)? {
        return Ok(Acquired::Taken);
    }
    let Some(old) = store.lease_holder(&lease.key)? else {
        // Released between the two statements: try once more.
        return Ok(
            if store.take_lease(&lease.key, lease.holder, now_ms, lease.ttl_ms)? {
                Acquired::Taken
            } else {
                Acquired::Held(store.lease_holder(&lease.key)?.unwrap_or_default())
            },
        );
    };
    if super::holder_is_dead_local(&old, lease.holder)
        && store.take_over_lease(&lease.key, &old, lease.holder, now_ms, lease.ttl_ms)?
    {
        return Ok(Acquired::TookOver(old));
    }
    Ok(Acquired::Held(old))
}

/// Runs `body` while the lease is held, then releases the lease on every path (an error of
/// `body` wins over an error of the release, which would otherwise leave the period blocked
/// until the lease expires).
pub fn holding<S: RunStore + ?Sized, T>(
    store: &mut S,
    lease: &Lease<'_>,
    body: impl FnOnce(&mut S) -> Result<T>,
) -> Result<T> {
    let result = body(store);
    let released = store.release_lease(&lease.key, lease.holder);
    let value = result?;
    released?;
    Ok(value)
}

/// How a run ended.
#[derive(Debug)]
pub enum Finished {
    /// Every result was written; the run as stored (with its counts) and its content.
    Completed(StoredRun, RunContent),
    /// The computation failed, the lease was lost during it, or the results could not be
    /// written: the run is stored as failed with this error.
    Failed(StoredRun, crate::Error),
}

/// Runs one period while holding its lease: begins the run (`on_begin` sees it), computes it,
/// renews the lease, then completes the run, or records why it failed. `now` is the caller's
/// clock. The lease is not released here (the caller releases it, whatever the outcome).
pub fn run_period<S: RunStore + ?Sized>(
    store: &mut S,
    lease: &Lease<'_>,
    header: &RunHeader,
    now: &dyn Fn() -> i64,
    on_begin: &mut dyn FnMut(&StoredRun),
    compute: impl FnOnce(&S) -> Result<RunContent>,
) -> Result<Finished> {
    let run = store.begin_run(header, now())?;
    on_begin(&run);
    let computed = compute(store);
    let still_ours = store.heartbeat(&lease.key, lease.holder, now(), lease.ttl_ms)?;
    let error = match computed {
        Ok(_) if !still_ours => crate::Error::Database(
            "the lease expired during the run; another scheduler may redo it".to_string(),
        ),
        Ok(content) => {
            let finished_ms = now();
            match store.complete_run(run.run_id, finished_ms, &content) {
                Ok(()) => {
                    // The run as it now stands in the store, without reading it back.
                    let stored = StoredRun {
                        status: RunStatus::Complete,
                        finished_ms: Some(finished_ms),
                        n_tests: Some(content.tests.len() as i64),
                        n_flagged: Some(content.n_flagged() as i64),
                        ..run
                    };
                    return Ok(Finished::Completed(stored, content));
                }
                Err(e) => e,
            }
        }
        Err(e) => e,
    };
    let finished_ms = now();
    store.fail_run(run.run_id, finished_ms, &error.to_string())?;
    let failed = StoredRun {
        status: RunStatus::Failed,
        finished_ms: Some(finished_ms),
        error: Some(error.to_string()),
        ..run
    };
    Ok(Finished::Failed(failed, error))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::PeriodKind;
    use crate::results::{TestResult, TestState};
    use crate::stats::fdr::FdrMethod;

    fn header() -> RunHeader {
        RunHeader {
            period_kind: PeriodKind::Day,
            period_label: "2026-11-30".into(),
            period_start_ms: 0,
            period_end_ms: 1,
            schedule: None,
            config_hash: "h".into(),
            tool_version: "t".into(),
            fdr_method: FdrMethod::BenjaminiHochberg,
            fdr_level: 0.05,
        }
    }

    fn lease(holder: &str) -> Lease<'_> {
        Lease {
            key: LeaseKey {
                schedule: String::new(),
                period_kind: "day".into(),
                period_label: "2026-11-30".into(),
            },
            holder,
            ttl_ms: 1000,
        }
    }

    fn one_test() -> RunContent {
        RunContent {
            tests: vec![TestResult {
                characteristic: "bore".into(),
                factor: "machine".into(),
                state: TestState::Differs,
                ..TestResult::default()
            }],
        }
    }

    #[test]
    fn a_held_lease_is_not_taken_until_it_expires() {
        let store = crate::storage::open_in_memory().unwrap();
        assert_eq!(
            acquire(&*store, &lease("a:1:x"), 0).unwrap(),
            Acquired::Taken
        );
        // Another host's holder: never taken over, only after expiry.
        assert_eq!(
            acquire(&*store, &lease("b:2:y"), 10).unwrap(),
            Acquired::Held("a:1:x".into())
        );
        assert_eq!(
            acquire(&*store, &lease("b:2:y"), 2000).unwrap(),
            Acquired::Taken
        );
    }

    #[test]
    fn the_lease_is_released_when_the_work_fails() {
        let mut store = crate::storage::open_in_memory().unwrap();
        let l = lease("a:1:x");
        assert!(acquire(&*store, &l, 0).unwrap().is_ours());
        let r: Result<()> = holding(&mut *store, &l, |_| Err(crate::Error::Usage("boom".into())));
        assert!(r.unwrap_err().to_string().contains("boom"));
        assert_eq!(store.lease_holder(&l.key).unwrap(), None);
        // Another holder can take it at once.
        assert_eq!(
            acquire(&*store, &lease("b:2:y"), 1).unwrap(),
            Acquired::Taken
        );
    }

    #[test]
    fn completed_failed_and_lost_lease_runs_are_recorded() {
        let mut store = crate::storage::open_in_memory().unwrap();
        let l = lease("a:1:x");
        assert!(acquire(&*store, &l, 0).unwrap().is_ours());
        let now = || 5;
        let mut begun = Vec::new();
        let done = run_period(
            &mut *store,
            &l,
            &header(),
            &now,
            &mut |r| begun.push(r.run_id),
            |_| Ok(one_test()),
        )
        .unwrap();
        let Finished::Completed(run, content) = done else {
            panic!("{done:?}")
        };
        assert_eq!((run.status, run.n_flagged), (RunStatus::Complete, Some(1)));
        assert_eq!(
            Some(&run),
            store.runs_of_period("day", "2026-11-30").unwrap().first(),
            "the returned run is the stored one"
        );
        assert_eq!(content.tests.len(), 1);
        assert_eq!(begun, [run.run_id]);
        // A failing computation: the run is failed with its error, nothing else is written.
        let done = run_period(&mut *store, &l, &header(), &now, &mut |_| {}, |_| {
            Err(crate::Error::Usage("no values".into()))
        })
        .unwrap();
        let Finished::Failed(run, e) = done else {
            panic!("{done:?}")
        };
        assert!(e.to_string().contains("no values"));
        let stored = store.runs_of_period("day", "2026-11-30").unwrap();
        assert_eq!(stored[1], run, "the returned run is the stored one");
        assert_eq!(stored[1].status, RunStatus::Failed);
        assert!(store.run_content(run.run_id).unwrap().tests.is_empty());
        // The lease lost during the run (expired and taken by another holder): not completed.
        let other = lease("b:2:y");
        let late = || 5000;
        let done = run_period(&mut *store, &l, &header(), &late, &mut |_| {}, |s| {
            assert!(acquire(s, &other, 5000).unwrap().is_ours());
            Ok(one_test())
        })
        .unwrap();
        assert!(
            matches!(&done, Finished::Failed(_, e) if e.to_string().contains("lease expired")),
            "{done:?}"
        );
        assert_eq!(
            store
                .latest_complete_run("day", "2026-11-30")
                .unwrap()
                .unwrap()
                .version,
            1
        );
    }
}
