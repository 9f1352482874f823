//! [`ImportStore::import`]: one file, one transaction, every row stored or rejected.
//!
//! The file is read (parsed by `ingest`) in one thread and written in the calling thread, linked
//! by a small bounded channel of batches, so memory stays constant whatever the file size. The
//! import row, the measurements, the rejected rows and any new characteristics, levels and level
//! sets are written in one IMMEDIATE transaction: a crash, a kill or an error before the commit
//! leaves the database exactly as it was. The content hash is checked against earlier imports
//! before the commit; a duplicate is refused (rolled back) unless `force` is set.
//! [`ImportStore::import_checking_early`] also hashes the file on a third thread while the import runs,
//! so a duplicate is refused within the first batches instead of at the end, without hashing
//! on the writing thread, which bounds the import's speed.

use std::collections::HashMap;
use std::io::Read;
use std::path::{Path, PathBuf};
use std::sync::mpsc;
use std::time::{Duration, Instant};

use chrono::{DateTime, TimeZone, Utc};
use rusqlite::{params, Connection, OptionalExtension, TransactionBehavior};

use crate::ingest::fxhash::FxMap;
use crate::ingest::{ImportStream, MeasurementRef, OutcomeSink, Rejection};
use crate::stats::decimal::Decimal;
use crate::{Error, Result};

use super::imports::{ImportRecord, UndoReport};
use super::master::{
    load_characteristics, load_factors, LevelSetStore, LevelSetWriter, StoredCharacteristic,
    StoredFactor,
};
use super::Store;

/// Accepted rows per batch handed from the reading thread to the writing one. Each batch is
/// sorted by key before it is inserted: the larger the batch, the longer the run of rows each
/// characteristic's B-tree leaf receives at once (262,144 rows: 10 MB; measured in
/// docs/performance.md, "Import speed").
const BATCH_ROWS: usize = 1 << 18;
/// Rejections per batch at most (each keeps up to `ingest::MAX_RAW_CHARS` of its line).
const BATCH_REJECTIONS: usize = 1024;
/// Batches in flight between the threads (with the one being filled and the one being written,
/// this bounds the memory of an import).
const IN_FLIGHT: usize = 2;
/// How many rejections the report keeps in full.
const FIRST_REJECTIONS: usize = 10;
/// Rejection records stored per import at most (each keeps up to `ingest::MAX_RAW_CHARS` of its
/// line, so a file of bad lines cannot grow the database without bound). The counts stay exact:
/// the import row records the measurements of the records not kept, and `import --rejects FILE`
/// receives every record as it is read.
pub const MAX_KEPT_REJECTIONS: u64 = 10_000;

/// Receives every rejection record of an import as it is written (see
/// [`ImportStore::import_checking_early`]).
pub type RejectionSink<'a> = &'a mut dyn FnMut(&Rejection) -> Result<()>;

/// Options of [`ImportStore::import`].
#[derive(Debug, Clone)]
pub struct ImportOptions {
    /// Import even when the same content was imported before.
    pub force: bool,
    /// When the import started (recorded in the import row; the caller reads the clock).
    pub started_at: DateTime<Utc>,
}

/// An earlier import of the same content.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PriorImport {
    /// Its import id.
    pub id: i64,
    /// The file name it was imported from.
    pub file_name: String,
    /// When it started.
    pub started_at: DateTime<Utc>,
    /// Measurements it stored.
    pub accepted: u64,
}

impl std::fmt::Display for PriorImport {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "import #{} ({}, {}, {} measurements)",
            self.id,
            self.file_name,
            self.started_at.format("%Y-%m-%d %H:%M:%S UTC"),
            self.accepted
        )
    }
}

/// What one import did. Always `accepted + rejected == measurements_read`.
#[derive(Debug, Clone)]
pub struct ImportReport {
    /// The new import's id.
    pub import_id: i64,
    /// The file.
    pub path: PathBuf,
    /// SHA-256 of its bytes.
    pub sha256: String,
    /// The layout used.
    pub layout: String,
    /// Data lines read (after the header), blank lines included.
    pub rows_read: u64,
    /// Measurements read: `rows_read` for long files, `rows_read x characteristic columns` for wide.
    pub measurements_read: u64,
    /// Measurements stored.
    pub accepted: u64,
    /// Measurements identical to a stored one (same characteristic, time, levels and value: an
    /// overlapping export), counted and not stored again.
    pub duplicates: u64,
    /// Measurements rejected (recorded in `rejected_rows`), conflicts with stored ones included.
    pub rejected: u64,
    /// Rejection records (one per bad row, or per bad cell of a wide row).
    pub rejection_records: u64,
    /// Of `rejected`, the measurements whose records were not stored (past
    /// [`MAX_KEPT_REJECTIONS`] records).
    pub rejected_not_kept: u64,
    /// Rejection counts by reason (quoted values folded), most frequent first.
    pub reasons: Vec<(String, u64)>,
    /// The first rejections, in file order.
    pub first_rejections: Vec<Rejection>,
    /// Characteristics created by this import (`--add-new`).
    pub new_characteristics: Vec<String>,
    /// The earlier import of the same content, when `force` imported it anyway.
    pub forced_over: Option<PriorImport>,
    /// Wall time of the import.
    pub elapsed: Duration,
    /// CPU time per thread of the import, where the platform tells it.
    pub cpu: ImportCpu,
}

/// CPU time used by each thread of one import (`None` where the platform does not tell it; read
/// from `/proc/thread-self/schedstat` on Linux). The writing thread bounds the import on a
/// machine with a core per thread, so this is what to watch when making it faster
/// (docs/performance.md, "Import speed").
#[derive(Debug, Clone, Copy, Default)]
pub struct ImportCpu {
    /// The reading thread: parsing, interning, sorting batches.
    pub reader: Option<Duration>,
    /// The writing (calling) thread, from the start of the import to the end of its commit.
    pub writer: Option<Duration>,
    /// The part of `writer` spent in the commit (with SQLite's WAL checkpoint after it).
    pub commit: Option<Duration>,
    /// The thread that hashed the file up front for the early duplicate check, when there was one.
    pub early_hash: Option<Duration>,
}

/// CPU time the calling thread has used so far (Linux; `None` elsewhere).
fn thread_cpu() -> Option<Duration> {
    let text = std::fs::read_to_string("/proc/thread-self/schedstat").ok()?;
    let ns: u64 = text.split_whitespace().next()?.parse().ok()?;
    Some(Duration::from_nanos(ns))
}

fn cpu_between(start: Option<Duration>, end: Option<Duration>) -> Option<Duration> {
    Some(end?.saturating_sub(start?))
}

struct CharacteristicState {
    id: i64,
    name: String,
    origin: Option<Decimal>,
    decimals: u32,
    is_changed: bool,
    /// Without an origin yet (no stored value, nothing configured): the first values of this
    /// import (their row in the current batch and their exact value), until [`ORIGIN_SAMPLE`]
    /// of them, or the batch's end, fix the origin at their median.
    pending: Vec<(usize, Decimal)>,
}

/// Values of a characteristic without a configured origin whose median becomes its origin, so
/// that one wild first value (a typo) cannot fix an origin far from the data.
const ORIGIN_SAMPLE: usize = 31;

/// One accepted measurement on its way to the writer. `characteristic` and `level_set` are the
/// reading thread's indices until the writer replaces them with database ids.
#[derive(Debug, Clone, Copy)]
pub(crate) struct ImportRow {
    pub(crate) characteristic: i64,
    pub(crate) ts_ms: i64,
    pub(crate) line: i64,
    pub(crate) value: f64,
    pub(crate) level_set: i64,
    /// Index into `Batch::parts`, or [`NO_PART`].
    part: u32,
    /// Index into `Batch::subgroups`, or [`NO_PART`].
    subgroup: u32,
}

/// `ImportRow::part` of a measurement without a part id.
const NO_PART: u32 = u32::MAX;

/// What the reading thread hands to the writer: rows and rejections in file order, plus the
/// characteristic names and level combinations first seen in this batch (numbered on from the
/// previous batches').
#[derive(Debug, Default)]
struct Batch {
    new_characteristics: Vec<String>,
    new_level_sets: Vec<Vec<String>>,
    rows: Vec<ImportRow>,
    rejections: Vec<Rejection>,
    /// Part ids of the batch's rows (layouts with a part column).
    parts: Vec<String>,
    /// Subgroup ids of the batch's rows (layouts with a subgroup); consecutive rows of one
    /// subgroup share an entry.
    subgroups: Vec<String>,
}

impl Batch {
    fn is_full(&self) -> bool {
        self.rows.len() >= BATCH_ROWS || self.rejections.len() >= BATCH_REJECTIONS
    }

    fn is_empty(&self) -> bool {
        self.rows.is_empty() && self.rejections.is_empty()
    }
}

/// The reading thread's side of an import: turns each outcome into a compact [`ImportRow`] (names
/// interned to indices, value to its offset from the characteristic's origin) so the writer does
/// nothing per row but bind and step. It reads the names borrowed from the line
/// ([`MeasurementRef`]): a string is copied only the first time it is seen.
struct Interner {
    /// Per characteristic index (database order, then new ones): origin and decimals so far.
    characteristics: Vec<CharacteristicState>,
    by_name: FxMap<String, u32>,
    /// Per factor: level name -> level index.
    levels: Vec<FxMap<String, u32>>,
    /// Level indices of a combination packed into one word (when they fit) -> combination
    /// index; `level_sets` holds the combinations that do not fit.
    packed_sets: FxMap<u64, u32>,
    /// Level indices of a combination -> combination index.
    level_sets: FxMap<Box<[u32]>, u32>,
    /// Combinations numbered so far.
    n_sets: u32,
    scratch: Vec<u32>,
    /// The batch being filled.
    batch: Batch,
}

impl OutcomeSink for Interner {
    fn accepted(&mut self, m: MeasurementRef<'_>) {
        self.push(m);
    }

    fn rejected(&mut self, rejection: Rejection) {
        self.batch.rejections.push(rejection);
    }
}

impl Interner {
    fn new(characteristics: Vec<CharacteristicState>) -> Interner {
        let by_name = characteristics
            .iter()
            .enumerate()
            .map(|(i, c)| (c.name.clone(), i as u32))
            .collect();
        Interner {
            characteristics,
            by_name,
            levels: Vec::new(),
            packed_sets: FxMap::default(),
            level_sets: FxMap::default(),
            n_sets: 0,
            scratch: Vec::new(),
            batch: Batch::default(),
        }
    }

    fn push(&mut self, m: MeasurementRef<'_>) {
        let batch = &mut self.batch;
        let idx = match self.by_name.get(m.characteristic) {
            Some(&i) => i as usize,
            None => {
                let i = self.characteristics.len();
                self.characteristics.push(CharacteristicState {
                    id: 0,
                    name: m.characteristic.to_string(),
                    origin: None,
                    decimals: 0,
                    is_changed: true,
                    pending: Vec::new(),
                });
                self.by_name.insert(m.characteristic.to_string(), i as u32);
                batch.new_characteristics.push(m.characteristic.to_string());
                i
            }
        };
        let state = &mut self.characteristics[idx];
        let decimals = m.value.scale().max(0) as u32;
        if decimals > state.decimals {
            state.decimals = decimals;
            state.is_changed = true;
        }
        let value = match state.origin {
            Some(origin) => m.value.offset_from(&origin),
            None => {
                // Placeholder until the origin is fixed (resolve_origin patches the row).
                state.pending.push((batch.rows.len(), m.value));
                0.0
            }
        };

        if self.levels.len() < m.levels.len() {
            self.levels.resize_with(m.levels.len(), FxMap::default);
        }
        self.scratch.clear();
        for (f, &name) in m.levels.iter().enumerate() {
            let map = &mut self.levels[f];
            let id = match map.get(name) {
                Some(&id) => id,
                None => {
                    let id = map.len() as u32;
                    map.insert(name.to_string(), id);
                    id
                }
            };
            self.scratch.push(id);
        }
        let owned_levels = || m.levels.iter().map(|l| l.to_string()).collect();
        // Pack the level indices into 64 bits when each fits its share of them (one key per
        // combination, either packed or not, so the two maps never hold the same combination).
        let bits = 64 / self.scratch.len().max(1) as u32;
        let fits = bits >= 32 || self.scratch.iter().all(|&id| id >> bits == 0);
        let level_set = if fits {
            let key = self
                .scratch
                .iter()
                .fold(0u64, |k, &id| k.checked_shl(bits).unwrap_or(0) | id as u64);
            match self.packed_sets.get(&key) {
                Some(&i) => i,
                None => {
                    let i = self.n_sets;
                    self.n_sets += 1;
                    self.packed_sets.insert(key, i);
                    batch.new_level_sets.push(owned_levels());
                    i
                }
            }
        } else {
            match self.level_sets.get(self.scratch.as_slice()) {
                Some(&i) => i,
                None => {
                    let i = self.n_sets;
                    self.n_sets += 1;
                    self.level_sets
                        .insert(self.scratch.clone().into_boxed_slice(), i);
                    batch.new_level_sets.push(owned_levels());
                    i
                }
            }
        };
        let part = match m.part {
            Some(p) => {
                batch.parts.push(p.to_string());
                (batch.parts.len() - 1) as u32
            }
            None => NO_PART,
        };
        let subgroup = match m.subgroup {
            Some(g) if batch.subgroups.last().is_some_and(|last| last == g) => {
                (batch.subgroups.len() - 1) as u32
            }
            Some(g) => {
                batch.subgroups.push(g.to_string());
                (batch.subgroups.len() - 1) as u32
            }
            None => NO_PART,
        };
        batch.rows.push(ImportRow {
            characteristic: idx as i64,
            ts_ms: ms(m.ts),
            line: m.line as i64,
            value,
            level_set: level_set as i64,
            part,
            subgroup,
        });
        if self.characteristics[idx].pending.len() >= ORIGIN_SAMPLE {
            Self::resolve_origin(&mut self.characteristics[idx], &mut self.batch);
        }
    }

    /// Fixes a characteristic's origin at the median of its pending values and writes their
    /// offsets into the batch rows they hold.
    fn resolve_origin(state: &mut CharacteristicState, batch: &mut Batch) {
        if state.pending.is_empty() {
            return;
        }
        let mut values: Vec<Decimal> = state.pending.iter().map(|&(_, v)| v).collect();
        values.sort_by(|a, b| a.to_f64().total_cmp(&b.to_f64()));
        let origin = values[values.len() / 2];
        state.origin = Some(origin);
        state.is_changed = true;
        for (row, value) in state.pending.drain(..) {
            batch.rows[row].value = value.offset_from(&origin);
        }
    }

    /// Fixes every pending origin before the batch leaves (its rows are patched in place).
    fn resolve_pending(&mut self) {
        for state in &mut self.characteristics {
            Self::resolve_origin(state, &mut self.batch);
        }
    }
}

/// Puts a batch in key order (characteristic, time, line), so that each characteristic's rows go
/// into the B-tree as one run and the pages they touch stay hot. Done by the reading thread, on
/// the characteristic indices: they are in database id order (existing characteristics by id,
/// then new ones, which get higher ids), so the order is the key order once the writer maps
/// them. (The order only matters for speed: any order stores the same rows.)
///
/// A counting sort by characteristic, then a sort of each characteristic's run only where the
/// file was not in time order already.
fn sort_rows(rows: &mut Vec<ImportRow>) {
    let n_characteristics = rows
        .iter()
        .map(|r| r.characteristic)
        .max()
        .map_or(0, |m| m + 1);
    let mut starts = vec![0usize; n_characteristics as usize + 1];
    for r in rows.iter() {
        starts[r.characteristic as usize + 1] += 1;
    }
    for i in 1..starts.len() {
        starts[i] += starts[i - 1];
    }
    let mut next = starts.clone();
    let mut sorted = vec![
        ImportRow {
            characteristic: 0,
            ts_ms: 0,
            line: 0,
            value: 0.0,
            level_set: 0,
            part: NO_PART,
            subgroup: NO_PART,
        };
        rows.len()
    ];
    for r in rows.iter() {
        let at = &mut next[r.characteristic as usize];
        sorted[*at] = *r;
        *at += 1;
    }
    for run in starts.windows(2) {
        let run = &mut sorted[run[0]..run[1]];
        if run
            .windows(2)
            .any(|w| (w[0].ts_ms, w[0].line) > (w[1].ts_ms, w[1].line))
        {
            run.sort_unstable_by_key(|r| (r.ts_ms, r.line));
        }
    }
    *rows = sorted;
}

/// Folds the values quoted in a reason (`value "1,5" is ...` -> `value "…" is ...`) so that
/// rejections count by kind.
pub(crate) fn reason_kind(reason: &str) -> String {
    let mut out = String::with_capacity(reason.len());
    let mut in_quote = false;
    for c in reason.chars() {
        if c == '"' {
            if in_quote {
                out.push_str("…\"");
            } else {
                out.push('"');
            }
            in_quote = !in_quote;
        } else if !in_quote {
            out.push(c);
        }
    }
    if in_quote {
        out.push('"');
    }
    // A worked example that repeats the value ("; give the offset, e.g. ...") is not part of the
    // kind either.
    if let Some(at) = out.find(", e.g. ") {
        out.truncate(at);
    }
    out
}

fn ms(ts: DateTime<Utc>) -> i64 {
    ts.timestamp_millis()
}

/// Finds the stored measurement with the same identity as an incoming row (the layout's
/// [`Identity`](crate::config::Identity): characteristic, and time, part id and factor levels as
/// configured).
struct IdentityLookup {
    time: bool,
    part: bool,
    all_factors: bool,
    /// Factor ids whose levels belong to the identity (when not all do).
    factor_ids: Vec<i64>,
    /// Level set id -> its (factor id, level id) members, read as needed.
    members: HashMap<i64, Vec<(i64, i64)>>,
}

impl IdentityLookup {
    fn new(
        identity: &crate::config::Identity,
        all_factors: bool,
        configured_factor_ids: &[i64],
    ) -> IdentityLookup {
        IdentityLookup {
            time: identity.time,
            part: identity.part,
            all_factors,
            factor_ids: identity
                .factors
                .iter()
                .filter_map(|&i| configured_factor_ids.get(i).copied())
                .collect(),
            members: HashMap::new(),
        }
    }

    fn load_members(&mut self, w: &mut impl ImportWriter, set: i64) -> Result<()> {
        if let std::collections::hash_map::Entry::Vacant(e) = self.members.entry(set) {
            e.insert(w.level_set_members(set)?);
        }
        Ok(())
    }

    /// Whether two level sets agree on every identity factor.
    fn same_levels(&mut self, w: &mut impl ImportWriter, a: i64, b: i64) -> Result<bool> {
        if a == b {
            return Ok(true);
        }
        if self.all_factors {
            // A level set is one combination of every factor: another id, other levels.
            return Ok(false);
        }
        self.load_members(w, a)?;
        self.load_members(w, b)?;
        let (a_members, b_members) = (&self.members[&a], &self.members[&b]);
        Ok(self.factor_ids.iter().all(|f| {
            let level = |m: &[(i64, i64)]| m.iter().find(|x| x.0 == *f).map(|x| x.1);
            level(a_members) == level(b_members)
        }))
    }

    /// The value of a stored measurement with `row`'s identity: the row's own value when one of
    /// them has it (a duplicate), else the first one's (a conflict); `None` when none is stored.
    fn stored_value(
        &mut self,
        w: &mut impl ImportWriter,
        row: &ImportRow,
        part: Option<&str>,
    ) -> Result<Option<f64>> {
        if self.part && part.is_none() {
            return Ok(None);
        }
        let by = if self.time && self.all_factors {
            Candidates::TimeAndLevels {
                characteristic: row.characteristic,
                ts_ms: row.ts_ms,
                level_set: row.level_set,
            }
        } else if self.time {
            Candidates::Time {
                characteristic: row.characteristic,
                ts_ms: row.ts_ms,
            }
        } else {
            Candidates::Part {
                characteristic: row.characteristic,
                part: part.unwrap_or_default(),
            }
        };
        let candidates = w.candidates(&by)?;
        let mut first = None;
        for (value, set, stored_part) in candidates {
            if self.part && stored_part.as_deref() != part {
                continue;
            }
            if !self.same_levels(w, set, row.level_set)? {
                continue;
            }
            if value == row.value {
                return Ok(Some(value));
            }
            first.get_or_insert(value);
        }
        Ok(first)
    }
}

/// The earliest import with this content hash that stored something and was not undone. An
/// import that stored nothing (every row rejected, or no rows) is kept with its rejections but
/// does not count as done: the corrected file, or the same one after a configuration fix, imports
/// without `--force`; so does a file whose import was undone.
pub(crate) fn imports_with_sha256(conn: &Connection, sha256: &str) -> Result<Option<PriorImport>> {
    Ok(conn
        .prepare_cached(
            "SELECT id, file_name, started_ms, accepted FROM imports i WHERE sha256 = ?1 AND accepted > 0 \
             AND NOT EXISTS (SELECT 1 FROM imports u WHERE u.undoes = i.id) ORDER BY id LIMIT 1",
        )?
        .query_row([sha256], |r| {
            Ok(PriorImport {
                id: r.get(0)?,
                file_name: r.get(1)?,
                started_at: Utc
                    .timestamp_millis_opt(r.get(2)?)
                    .single()
                    .unwrap_or_default(),
                accepted: r.get::<_, i64>(3)? as u64,
            })
        })
        .optional()?)
}

impl Store {
    fn import_in_transaction<R: Read + Send>(
        &mut self,
        stream: ImportStream<R>,
        options: &ImportOptions,
        early_file: Option<&Path>,
        on_rejection: Option<RejectionSink<'_>>,
    ) -> Result<ImportReport> {
        let clock = Instant::now();
        let writer_start = thread_cpu();
        let tx = self
            .conn
            .transaction_with_behavior(TransactionBehavior::Immediate)?;
        let database = self.path.clone();
        let mut note = None;
        let (mut report, early_hash) = {
            let mut w = SqliteImport {
                conn: &tx,
                insert_measurement: tx.prepare_cached(
                    "INSERT INTO measurements (characteristic_id, ts_ms, import_id, line, value, level_set_id, part, subgroup) \
                     VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8)",
                )?,
                latest: tx.prepare_cached(
                    "SELECT MAX(ts_ms) FROM measurements WHERE characteristic_id = ?1",
                )?,
                insert_rejection: tx.prepare_cached(
                    "INSERT INTO rejected_rows (import_id, line, column_name, reason, raw, measurements) \
                     VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
                )?,
                bound_import: None,
            };
            drive_import(
                &mut w,
                stream,
                options,
                early_file,
                on_rejection,
                |import_id, file_name| {
                    // While this transaction holds the write lock, other writers can tell who
                    // holds it.
                    note = super::WriterNote::write(
                        database.as_deref(),
                        &format!("import #{import_id} of {file_name}"),
                        options.started_at,
                    );
                },
            )?
        };
        let commit_start = thread_cpu();
        tx.commit()?;
        drop(note);
        let writer_end = thread_cpu();
        report.cpu.writer = cpu_between(writer_start, writer_end);
        report.cpu.commit = cpu_between(commit_start, writer_end);
        report.cpu.early_hash = early_hash;
        report.elapsed = clock.elapsed();
        Ok(report)
    }
}

/// Where [`ImportWriter::candidates`] looks for stored measurements with a row's identity.
#[derive(Debug, Clone, Copy)]
pub(crate) enum Candidates<'a> {
    /// Same characteristic, instant and level set (the identity is time and every factor).
    TimeAndLevels {
        characteristic: i64,
        ts_ms: i64,
        level_set: i64,
    },
    /// Same characteristic and instant (some factors, or none, belong to the identity).
    Time { characteristic: i64, ts_ms: i64 },
    /// Same characteristic and part id (the identity has no time).
    Part { characteristic: i64, part: &'a str },
}

/// What an import writes at its end into its own import row.
#[derive(Debug, Clone)]
pub(crate) struct FinishedImport<'a> {
    pub(crate) sha256: &'a str,
    pub(crate) finished_ms: i64,
    pub(crate) rows_read: i64,
    pub(crate) accepted: i64,
    pub(crate) rejected: i64,
    pub(crate) duplicates: i64,
    pub(crate) ts_min_ms: Option<i64>,
    pub(crate) ts_max_ms: Option<i64>,
    pub(crate) rejected_not_kept: i64,
}

/// The database side of one import, inside the import's one transaction: what the import
/// ([`drive_import`], shared by every backend) asks of a backend. The backend opens the
/// transaction, hands a writer to `drive_import`, and commits when it returns `Ok`.
pub(crate) trait ImportWriter: LevelSetStore {
    /// Writes the import row (counts zero, hash empty until [`ImportWriter::finish_import`]);
    /// its id.
    fn begin(
        &mut self,
        file_name: &str,
        path: &str,
        layout: &str,
        started_ms: i64,
        force: bool,
    ) -> Result<i64>;
    /// Every stored characteristic, in id order.
    fn characteristics(&mut self) -> Result<Vec<StoredCharacteristic>>;
    /// The earliest import with this content hash that stored something and was not undone
    /// ([`imports_with_sha256`]'s rule).
    fn prior_import(&mut self, sha256: &str) -> Result<Option<PriorImport>>;
    /// Stores a characteristic first seen in this file (`--add-new`); its id.
    fn insert_characteristic(&mut self, name: &str) -> Result<i64>;
    /// The latest instant stored for a characteristic.
    fn latest_ts(&mut self, characteristic: i64) -> Result<Option<i64>>;
    /// The stored measurements (value, level set, part) with an identity, in primary-key order
    /// (instant, import, line). Sees the rows this import wrote with `visible` set.
    fn candidates(&mut self, by: &Candidates<'_>) -> Result<Vec<(f64, i64, Option<String>)>>;
    /// The (factor id, level id) members of a level set.
    fn level_set_members(&mut self, set: i64) -> Result<Vec<(i64, i64)>>;
    /// Stores one measurement of import `import_id`. `visible`: a later row of this import may
    /// look it up as a candidate, so it must be written before the next call to
    /// [`ImportWriter::candidates`]; other rows may be buffered until [`ImportWriter::flush`].
    fn write_measurement(
        &mut self,
        import_id: i64,
        row: &ImportRow,
        part: Option<&str>,
        subgroup: Option<&str>,
        visible: bool,
    ) -> Result<()>;
    /// Writes what `write_measurement` buffered (at the end of each batch).
    fn flush(&mut self) -> Result<()>;
    /// Stores one rejection record of import `import_id`.
    fn write_rejection(&mut self, import_id: i64, r: &Rejection) -> Result<()>;
    /// Records a characteristic's origin and decimals.
    fn set_origin(&mut self, id: i64, origin: Option<String>, decimals: u32) -> Result<()>;
    /// Completes the import row.
    fn finish_import(&mut self, import_id: i64, f: &FinishedImport<'_>) -> Result<()>;
}

/// The file name of an import's path (its display form when it has none, e.g. `-`). A file
/// descriptor of a pipe handed over by the shell (`<(...)`: `/dev/fd/63`, `/proc/self/fd/63`)
/// keeps its whole path: its last part alone, a bare number, would name nothing.
fn file_name_of(path: &Path) -> String {
    let descriptor = path
        .parent()
        .is_some_and(|p| p == Path::new("/dev/fd") || p.ends_with("fd") && p.starts_with("/proc"));
    match path.file_name() {
        Some(n) if !descriptor => n.to_string_lossy().into_owned(),
        _ => path.display().to_string(),
    }
}

/// One import through `w`, inside the backend's transaction: every measurement of the stream is
/// stored, counted as a duplicate or recorded as rejected, and the counts add up; the file is
/// read on a thread of its own (and, with `early_file`, hashed on a third so a duplicate is
/// refused early). The backend commits when this returns `Ok`, and rolls back otherwise.
/// `writer_note` is called with the import's id once its row exists (SQLite's writer note).
pub(crate) fn drive_import<R: Read + Send, W: ImportWriter>(
    w: &mut W,
    stream: ImportStream<R>,
    options: &ImportOptions,
    early_file: Option<&Path>,
    mut on_rejection: Option<RejectionSink<'_>>,
    writer_note: impl FnOnce(i64, &str),
) -> Result<(ImportReport, Option<Duration>)> {
    let clock = Instant::now();
    let path = stream.path().to_path_buf();
    let identity = stream.layout().identity.clone();
    let all_factors = identity.factors.len() == stream.layout().factor_columns.len();
    let layout = stream.layout().name.clone();
    let file_name = file_name_of(&path);
    let import_id = w.begin(
        &file_name,
        &path.display().to_string(),
        &layout,
        ms(options.started_at),
        options.force,
    )?;
    writer_note(import_id, &file_name);

    let characteristics: Vec<CharacteristicState> = w
        .characteristics()?
        .into_iter()
        .map(|c| {
            // No origin yet (no value stored): the configuration's target or the middle of
            // its limits, so the first value, a typo perhaps, does not fix it for good.
            let configured = c.origin.is_none().then(|| c.config.configured_origin());
            let configured = configured.flatten();
            CharacteristicState {
                id: c.id,
                name: c.config.name,
                origin: c.origin.or(configured),
                decimals: c.decimals,
                is_changed: configured.is_some(),
                pending: Vec::new(),
            }
        })
        .collect();
    let mut level_sets = LevelSetWriter::load(w)?;
    // Database id per characteristic index and level set id per combination index, in the
    // order the reading thread numbered them.
    let mut characteristic_ids: Vec<i64> = characteristics.iter().map(|c| c.id).collect();
    let mut level_set_ids: Vec<i64> = Vec::new();
    let mut new_characteristics = Vec::new();
    // Stored origins by characteristic id, to name both values of a conflict in units.
    let origins: HashMap<i64, Decimal> = characteristics
        .iter()
        .filter_map(|c| c.origin.map(|o| (c.id, o)))
        .collect();
    let mut stored_rows = 0u64;
    // The time range of what this import stores: a checked period it falls in is stale.
    let (mut ts_min, mut ts_max) = (i64::MAX, i64::MIN);
    let mut duplicates = 0u64;
    let mut n_conflicts = 0u64;
    let mut rejected = 0u64;
    let mut records = 0u64;
    let mut not_kept = 0u64;
    let mut reasons: HashMap<String, u64> = HashMap::new();
    let mut first_rejections = Vec::new();

    let (sender, receiver) = mpsc::sync_channel::<Batch>(IN_FLIGHT);
    let mut early_hash_cpu = None;
    let (reader_result, write_result) = std::thread::scope(|scope| {
        let mut early = early_file.map(|file| {
            scope.spawn(move || {
                let sha256 = crate::ingest::file_sha256(file);
                (sha256, thread_cpu())
            })
        });
        let reader = scope.spawn(move || {
            let mut interner = Interner::new(characteristics);
            let mut stream = stream;
            while stream.read_into(&mut interner) {
                if interner.batch.is_full() {
                    interner.resolve_pending();
                    let mut full = std::mem::take(&mut interner.batch);
                    sort_rows(&mut full.rows);
                    if sender.send(full).is_err() {
                        // The writer stopped on an error; stop reading.
                        return (stream, interner.characteristics, thread_cpu());
                    }
                }
            }
            interner.resolve_pending();
            if !interner.batch.is_empty() {
                let mut last = std::mem::take(&mut interner.batch);
                sort_rows(&mut last.rows);
                let _ = sender.send(last);
            }
            (stream, interner.characteristics, thread_cpu())
        });
        let write_result = (|| -> Result<()> {
            let mut lookup = IdentityLookup::new(&identity, all_factors, level_sets.factor_ids());
            let mut latest_stored: HashMap<i64, Option<i64>> = HashMap::new();
            let mut conflicts: Vec<Rejection> = Vec::new();
            for mut batch in receiver.iter() {
                if early.as_ref().is_some_and(|h| h.is_finished()) {
                    let hashed = early.take().map(|h| h.join());
                    if let Some(Ok((sha256, cpu))) = hashed {
                        early_hash_cpu = cpu;
                        // A file that cannot be read up front fails the stream as well;
                        // that error is the one reported.
                        if let Ok(sha256) = sha256 {
                            if let Some(prior) = w.prior_import(&sha256)? {
                                return Err(Error::AlreadyImported {
                                    path: path.clone(),
                                    earlier: prior.to_string(),
                                });
                            }
                        }
                    }
                }
                for name in batch.new_characteristics.drain(..) {
                    characteristic_ids.push(w.insert_characteristic(&name)?);
                    new_characteristics.push(name);
                }
                level_set_ids.extend(level_sets.ids_for(w, &batch.new_level_sets)?);
                for row in &mut batch.rows {
                    row.characteristic = characteristic_ids[row.characteristic as usize];
                    row.level_set = level_set_ids[row.level_set as usize];
                }
                for row in &batch.rows {
                    let part =
                        (row.part != NO_PART).then(|| batch.parts[row.part as usize].as_str());
                    // With the time in the identity, only a row at or before the latest
                    // instant stored for its characteristic (read before this import wrote
                    // any) may repeat a stored measurement: an export that overlaps the
                    // previous one. Identified by its part alone, any row may.
                    let may_repeat = if identity.time {
                        let latest = match latest_stored.get(&row.characteristic) {
                            Some(&t) => t,
                            None => {
                                let t = w.latest_ts(row.characteristic)?;
                                latest_stored.insert(row.characteristic, t);
                                t
                            }
                        };
                        latest.is_some_and(|t| row.ts_ms <= t)
                    } else {
                        part.is_some()
                    };
                    if may_repeat {
                        if let Some(value) = lookup.stored_value(w, row, part)? {
                            if value == row.value {
                                duplicates += 1;
                            } else {
                                let origin = origins.get(&row.characteristic);
                                let units = |v: f64| {
                                    origin.map_or(format!("{v} (offset)"), |o| {
                                        format!("{}", o.plus_offset(v))
                                    })
                                };
                                conflicts.push(Rejection {
                                    line: row.line as u64,
                                    column: Some("value".to_string()),
                                    reason: format!(
                                        "conflicts with a stored measurement of the same characteristic, time and levels: stored \"{}\", this row \"{}\"",
                                        units(value),
                                        units(row.value)
                                    ),
                                    raw: String::new(),
                                    measurements: 1,
                                });
                            }
                            continue;
                        }
                    }
                    let subgroup = (row.subgroup != NO_PART)
                        .then(|| batch.subgroups[row.subgroup as usize].as_str());
                    // A row that a later row of this file may look up: one in the overlap
                    // (at or before the latest stored instant), or any row with a part id
                    // when the identity is the part.
                    w.write_measurement(import_id, row, part, subgroup, may_repeat)?;
                    stored_rows += 1;
                    ts_min = ts_min.min(row.ts_ms);
                    ts_max = ts_max.max(row.ts_ms);
                }
                w.flush()?;
                n_conflicts += conflicts.len() as u64;
                batch.rejections.append(&mut conflicts);
                for r in batch.rejections {
                    if let Some(f) = on_rejection.as_mut() {
                        f(&r)?;
                    }
                    if records < MAX_KEPT_REJECTIONS {
                        w.write_rejection(import_id, &r)?;
                    } else {
                        not_kept += r.measurements;
                    }
                    records += 1;
                    *reasons.entry(reason_kind(&r.reason)).or_insert(0) += r.measurements;
                    rejected += r.measurements;
                    if first_rejections.len() < FIRST_REJECTIONS {
                        first_rejections.push(r);
                    }
                }
            }
            Ok(())
        })();
        // Dropping the receiver unblocks a reader still sending after a write error.
        drop(receiver);
        let reader_result = reader.join().expect("the import reading thread panicked");
        if let Some(Ok((_, cpu))) = early.map(|h| h.join()) {
            early_hash_cpu = cpu;
        }
        (reader_result, write_result)
    });
    let (stream, characteristics, reader_cpu) = reader_result;
    let mut stream = stream;
    write_result?;
    if let Some(error) = stream.take_error() {
        return Err(error);
    }
    let counts = stream.counts();
    let sha256 = stream
        .file_sha256()
        .ok_or_else(|| Error::Ingest {
            path: path.clone(),
            line: None,
            column: None,
            reason: "the file was not read to the end".to_string(),
        })?
        .to_string();
    // What the reader accepted was stored, found stored already, or conflicts (rejected here).
    let accepted = stored_rows + duplicates;
    if accepted + n_conflicts != counts.accepted || rejected != counts.rejected + n_conflicts {
        return Err(Error::Database(format!(
            "{}: counts do not add up (stored {stored_rows} + duplicate {duplicates} + rejected {rejected}, read {} + {}); nothing was imported",
            path.display(),
            counts.accepted,
            counts.rejected
        )));
    }
    let prior = w.prior_import(&sha256)?;
    if let Some(prior) = &prior {
        if !options.force {
            return Err(Error::AlreadyImported {
                path,
                earlier: prior.to_string(),
            });
        }
    }
    for (i, c) in characteristics
        .iter()
        .enumerate()
        .filter(|(_, c)| c.is_changed)
    {
        w.set_origin(
            characteristic_ids[i],
            c.origin.map(|o| o.to_string()),
            c.decimals,
        )?;
    }
    let elapsed = clock.elapsed();
    let finished = options.started_at + chrono::Duration::from_std(elapsed).unwrap_or_default();
    w.finish_import(
        import_id,
        &FinishedImport {
            sha256: &sha256,
            finished_ms: ms(finished),
            rows_read: (accepted + rejected) as i64,
            accepted: accepted as i64,
            rejected: rejected as i64,
            duplicates: duplicates as i64,
            ts_min_ms: (stored_rows > 0).then_some(ts_min),
            ts_max_ms: (stored_rows > 0).then_some(ts_max),
            rejected_not_kept: not_kept as i64,
        },
    )?;
    let mut reasons: Vec<(String, u64)> = reasons.into_iter().collect();
    reasons.sort_by(|a, b| b.1.cmp(&a.1).then_with(|| a.0.cmp(&b.0)));
    Ok((
        ImportReport {
            import_id,
            path,
            sha256,
            layout,
            rows_read: counts.rows_read,
            measurements_read: counts.measurements_read,
            accepted: stored_rows,
            duplicates,
            rejected,
            rejection_records: records,
            rejected_not_kept: not_kept,
            reasons,
            first_rejections,
            new_characteristics,
            forced_over: prior,
            elapsed: clock.elapsed(),
            cpu: ImportCpu {
                reader: reader_cpu,
                writer: None,
                commit: None,
                early_hash: None,
            },
        },
        early_hash_cpu,
    ))
}

/// SQLite's side of an import: statements prepared once on the import's transaction; every
/// measurement is written at once (SQLite's own writes are visible to its reads), so `visible`
/// and `flush` need nothing.
struct SqliteImport<'c> {
    conn: &'c Connection,
    insert_measurement: rusqlite::CachedStatement<'c>,
    latest: rusqlite::CachedStatement<'c>,
    insert_rejection: rusqlite::CachedStatement<'c>,
    bound_import: Option<i64>,
}

impl LevelSetStore for SqliteImport<'_> {
    fn stored_factors(&mut self) -> Result<Vec<StoredFactor>> {
        load_factors(self.conn)
    }
    fn levels_of(&mut self, factor_id: i64) -> Result<Vec<(String, i64)>> {
        let mut stmt = self
            .conn
            .prepare_cached("SELECT name, id FROM levels WHERE factor_id = ?1")?;
        let rows = stmt.query_map([factor_id], |r| Ok((r.get(0)?, r.get(1)?)))?;
        Ok(rows.collect::<rusqlite::Result<_>>()?)
    }
    fn has_level_sets(&mut self) -> Result<bool> {
        Ok(self
            .conn
            .query_row("SELECT EXISTS (SELECT 1 FROM level_sets)", [], |r| r.get(0))?)
    }
    fn insert_level(&mut self, factor_id: i64, name: &str) -> Result<i64> {
        self.conn
            .prepare_cached("INSERT INTO levels (factor_id, name) VALUES (?1, ?2)")?
            .execute(params![factor_id, name])?;
        Ok(self.conn.last_insert_rowid())
    }
    /// One look-up per key: SQLite answers it in-process.
    fn find_level_sets(&mut self, keys: &[&str]) -> Result<HashMap<String, i64>> {
        let mut find = self
            .conn
            .prepare_cached("SELECT id FROM level_sets WHERE key = ?1")?;
        let mut out = HashMap::new();
        for key in keys {
            if let Some(id) = find.query_row([key], |r| r.get(0)).optional()? {
                out.insert(key.to_string(), id);
            }
        }
        Ok(out)
    }
    /// One insert per set and per member, on statements prepared once.
    fn insert_level_sets(&mut self, sets: &[(&str, &[(i64, i64)])]) -> Result<Vec<i64>> {
        let mut insert_set = self
            .conn
            .prepare_cached("INSERT INTO level_sets (key) VALUES (?1)")?;
        let mut insert_member = self.conn.prepare_cached(
            "INSERT INTO level_set_members (level_set_id, factor_id, level_id) VALUES (?1, ?2, ?3)",
        )?;
        let mut ids = Vec::with_capacity(sets.len());
        for (key, members) in sets {
            insert_set.execute([key])?;
            let id = self.conn.last_insert_rowid();
            insert_member.raw_bind_parameter(1, id)?;
            for (factor_id, level_id) in members.iter() {
                insert_member.raw_bind_parameter(2, factor_id)?;
                insert_member.raw_bind_parameter(3, level_id)?;
                insert_member.raw_execute()?;
            }
            ids.push(id);
        }
        Ok(ids)
    }
}

impl ImportWriter for SqliteImport<'_> {
    fn begin(
        &mut self,
        file_name: &str,
        path: &str,
        layout: &str,
        started_ms: i64,
        force: bool,
    ) -> Result<i64> {
        self.conn.execute(
            "INSERT INTO imports (file_name, path, sha256, layout, started_ms, finished_ms, rows_read, \
             accepted, rejected, is_forced) VALUES (?1, ?2, '', ?3, ?4, ?4, 0, 0, 0, ?5)",
            params![file_name, path, layout, started_ms, force],
        )?;
        Ok(self.conn.last_insert_rowid())
    }
    fn characteristics(&mut self) -> Result<Vec<StoredCharacteristic>> {
        load_characteristics(self.conn)
    }
    fn prior_import(&mut self, sha256: &str) -> Result<Option<PriorImport>> {
        imports_with_sha256(self.conn, sha256)
    }
    fn insert_characteristic(&mut self, name: &str) -> Result<i64> {
        self.conn.execute(
            "INSERT INTO characteristics (name, is_configured) VALUES (?1, 0)",
            [name],
        )?;
        Ok(self.conn.last_insert_rowid())
    }
    fn latest_ts(&mut self, characteristic: i64) -> Result<Option<i64>> {
        Ok(self.latest.query_row([characteristic], |r| r.get(0))?)
    }
    fn candidates(&mut self, by: &Candidates<'_>) -> Result<Vec<(f64, i64, Option<String>)>> {
        let get = |r: &rusqlite::Row<'_>| Ok((r.get(0)?, r.get(1)?, r.get(2)?));
        let rows = match *by {
            Candidates::TimeAndLevels {
                characteristic,
                ts_ms,
                level_set,
            } => self
                .conn
                .prepare_cached(
                    "SELECT value, level_set_id, part FROM measurements \
                     WHERE characteristic_id = ?1 AND ts_ms = ?2 AND level_set_id = ?3",
                )?
                .query_map(params![characteristic, ts_ms, level_set], get)?
                .collect::<rusqlite::Result<_>>()?,
            Candidates::Time {
                characteristic,
                ts_ms,
            } => self
                .conn
                .prepare_cached(
                    "SELECT value, level_set_id, part FROM measurements \
                     WHERE characteristic_id = ?1 AND ts_ms = ?2",
                )?
                .query_map(params![characteristic, ts_ms], get)?
                .collect::<rusqlite::Result<_>>()?,
            Candidates::Part {
                characteristic,
                part,
            } => self
                .conn
                .prepare_cached(
                    "SELECT value, level_set_id, part FROM measurements \
                     WHERE characteristic_id = ?1 AND part = ?2",
                )?
                .query_map(params![characteristic, part], get)?
                .collect::<rusqlite::Result<_>>()?,
        };
        Ok(rows)
    }
    fn level_set_members(&mut self, set: i64) -> Result<Vec<(i64, i64)>> {
        Ok(self
            .conn
            .prepare_cached(
                "SELECT factor_id, level_id FROM level_set_members WHERE level_set_id = ?1",
            )?
            .query_map([set], |r| Ok((r.get(0)?, r.get(1)?)))?
            .collect::<rusqlite::Result<_>>()?)
    }
    #[inline]
    fn write_measurement(
        &mut self,
        import_id: i64,
        row: &ImportRow,
        part: Option<&str>,
        subgroup: Option<&str>,
        _visible: bool,
    ) -> Result<()> {
        let stmt = &mut self.insert_measurement;
        if self.bound_import != Some(import_id) {
            stmt.raw_bind_parameter(3, import_id)?;
            self.bound_import = Some(import_id);
        }
        stmt.raw_bind_parameter(1, row.characteristic)?;
        stmt.raw_bind_parameter(2, row.ts_ms)?;
        stmt.raw_bind_parameter(4, row.line)?;
        stmt.raw_bind_parameter(5, row.value)?;
        stmt.raw_bind_parameter(6, row.level_set)?;
        stmt.raw_bind_parameter(7, part)?;
        stmt.raw_bind_parameter(8, subgroup)?;
        stmt.raw_execute()?;
        Ok(())
    }
    fn flush(&mut self) -> Result<()> {
        Ok(())
    }
    fn write_rejection(&mut self, import_id: i64, r: &Rejection) -> Result<()> {
        self.insert_rejection.execute(params![
            import_id,
            r.line as i64,
            r.column,
            r.reason,
            r.raw,
            r.measurements as i64
        ])?;
        Ok(())
    }
    fn set_origin(&mut self, id: i64, origin: Option<String>, decimals: u32) -> Result<()> {
        self.conn.execute(
            "UPDATE characteristics SET origin = ?2, decimals = ?3 WHERE id = ?1",
            params![id, origin, decimals],
        )?;
        Ok(())
    }
    fn finish_import(&mut self, import_id: i64, f: &FinishedImport<'_>) -> Result<()> {
        self.conn.execute(
            "UPDATE imports SET sha256 = ?2, finished_ms = ?3, rows_read = ?4, accepted = ?5, rejected = ?6, \
             duplicates = ?7, ts_min_ms = ?8, ts_max_ms = ?9, rejected_not_kept = ?10 WHERE id = ?1",
            params![
                import_id,
                f.sha256,
                f.finished_ms,
                f.rows_read,
                f.accepted,
                f.rejected,
                f.duplicates,
                f.ts_min_ms,
                f.ts_max_ms,
                f.rejected_not_kept
            ],
        )?;
        Ok(())
    }
}

/// A file read into the store ([`ImportStream`] over any reader, boxed so that the
/// trait serves as a trait object; the stream buffers 64 KiB per read, so the indirection costs
/// nothing measurable).
pub type BoxedStream<'r> = ImportStream<Box<dyn Read + Send + 'r>>;

/// Imports: writing one, finding an earlier one by content, the record of every import and
/// undoing one. What a second backend implements; its contract:
/// - an import is one transaction: every measurement of the stream is stored, counted as a
///   duplicate of one already stored (same characteristic, instant and levels), or recorded as
///   rejected (file line, column, reason, raw text), and the counts add up; on any error, or a
///   file whose content was imported before (by SHA-256) without `force`, nothing is written;
/// - ids of imports increase; an undo is an import record of its own;
/// - readers never see half an import.
pub trait ImportStore {
    /// Imports one file (see the contract above).
    fn import(&mut self, stream: BoxedStream<'_>, options: &ImportOptions) -> Result<ImportReport> {
        self.import_checking_early(stream, options, None, None)
    }
    /// [`ImportStore::import`], and unless `options.force` is set, `file` (the file the stream
    /// reads) may be hashed on the side so that a duplicate is refused long before the end of
    /// a large file (rolled back as one found at the end would be). `on_rejection` receives
    /// every rejection in file order as it is recorded; an error from it ends the import with
    /// nothing written.
    fn import_checking_early(
        &mut self,
        stream: BoxedStream<'_>,
        options: &ImportOptions,
        file: Option<&Path>,
        on_rejection: Option<RejectionSink<'_>>,
    ) -> Result<ImportReport>;
    /// The earliest import not undone of content with this SHA-256 (64 lowercase hex digits),
    /// if any.
    fn find_import_by_sha256(&self, sha256: &str) -> Result<Option<PriorImport>>;
    /// The rejected rows kept for one import (at most [`MAX_KEPT_REJECTIONS`]), in file order;
    /// empty for an import without rejections or an unknown id.
    fn rejected_rows(&self, import_id: i64) -> Result<Vec<Rejection>>;
    /// Every import in id order, undos included; empty for a new database.
    fn import_records(&self) -> Result<Vec<ImportRecord>>;
    /// Removes import `id`'s measurements and rejection records in one transaction and records
    /// the undo, so that every checked period it touched becomes stale; the undone import keeps
    /// its record. An unknown id, an undo, or an import undone already is refused with nothing
    /// changed.
    fn undo_import(&mut self, id: i64, now: DateTime<Utc>) -> Result<UndoReport>;
}

impl ImportStore for Store {
    fn import_checking_early(
        &mut self,
        stream: BoxedStream<'_>,
        options: &ImportOptions,
        file: Option<&Path>,
        on_rejection: Option<RejectionSink<'_>>,
    ) -> Result<ImportReport> {
        self.conn.pragma_update(None, "foreign_keys", "OFF")?;
        let early_file = if options.force { None } else { file };
        let result = self.import_in_transaction(stream, options, early_file, on_rejection);
        // Outside any transaction again (committed or rolled back), so the pragma takes effect.
        let restored = self.conn.pragma_update(None, "foreign_keys", "ON");
        let report = result?;
        restored?;
        Ok(report)
    }
    fn find_import_by_sha256(&self, sha256: &str) -> Result<Option<PriorImport>> {
        imports_with_sha256(&self.conn, sha256)
    }
    fn rejected_rows(&self, import_id: i64) -> Result<Vec<Rejection>> {
        let mut stmt = self.conn.prepare_cached(
            "SELECT line, column_name, reason, raw, measurements FROM rejected_rows WHERE import_id = ?1 ORDER BY line, id",
        )?;
        let rows = stmt.query_map([import_id], |r| {
            Ok(Rejection {
                line: r.get::<_, i64>(0)? as u64,
                column: r.get(1)?,
                reason: r.get(2)?,
                raw: r.get(3)?,
                measurements: r.get::<_, i64>(4)? as u64,
            })
        })?;
        Ok(rows.collect::<rusqlite::Result<_>>()?)
    }
    fn import_records(&self) -> Result<Vec<ImportRecord>> {
        Store::import_records(self)
    }
    fn undo_import(&mut self, id: i64, now: DateTime<Utc>) -> Result<UndoReport> {
        Store::undo_import(self, id, now)
    }
}

#[cfg(test)]
mod tests {
    use super::{file_name_of, reason_kind, sort_rows, ImportRow};
    use std::path::Path;

    #[test]
    fn a_shell_pipe_keeps_its_whole_path_as_its_name() {
        assert_eq!(
            file_name_of(Path::new("/data/exports/cmm-11.csv")),
            "cmm-11.csv"
        );
        assert_eq!(file_name_of(Path::new("-")), "-");
        assert_eq!(file_name_of(Path::new("/dev/fd/63")), "/dev/fd/63");
        assert_eq!(
            file_name_of(Path::new("/proc/self/fd/12")),
            "/proc/self/fd/12"
        );
        assert_eq!(file_name_of(Path::new("/srv/fd/x.csv")), "x.csv");
    }

    #[test]
    fn batches_go_in_key_order_and_keep_every_row() {
        // Interleaved characteristics, one of them out of time order (a later line with an
        // earlier instant).
        let row = |characteristic, ts_ms, line| ImportRow {
            characteristic,
            ts_ms,
            line,
            value: line as f64,
            level_set: 0,
            part: super::NO_PART,
            subgroup: super::NO_PART,
        };
        let mut rows = vec![
            row(2, 10, 2),
            row(0, 10, 3),
            row(2, 5, 4),
            row(1, 7, 5),
            row(0, 11, 6),
            row(0, 11, 1),
        ];
        let mut expected: Vec<(i64, i64, i64)> = rows
            .iter()
            .map(|r| (r.characteristic, r.ts_ms, r.line))
            .collect();
        expected.sort();
        sort_rows(&mut rows);
        let got: Vec<(i64, i64, i64)> = rows
            .iter()
            .map(|r| (r.characteristic, r.ts_ms, r.line))
            .collect();
        assert_eq!(got, expected);
        assert!(rows.iter().all(|r| r.value == r.line as f64));
        let mut empty = Vec::new();
        sort_rows(&mut empty);
        assert!(empty.is_empty());
    }

    #[test]
    fn reasons_fold_quoted_values() {
        assert_eq!(
            reason_kind("value \"1,5\" is not a number"),
            "value \"…\" is not a number"
        );
        assert_eq!(reason_kind("blank line"), "blank line");
        assert_eq!(
            reason_kind(
                "local time \"25.10.2026 02:46:49\" occurs twice in Europe/Berlin (the clocks go \
                 back); write the time with its offset, e.g. one of its two readings \
                 2026-10-25T02:46:49+02:00 (CEST, the first) and 2026-10-25T02:46:49+01:00 (CET, \
                 the second)"
            ),
            "local time \"…\" occurs twice in Europe/Berlin (the clocks go back); write the \
             time with its offset"
        );
    }
}
