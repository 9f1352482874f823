//! The analysis read path: [`MeasurementStore::load_period`] returns a [`PeriodFrame`], the measurements of a
//! time window column by column (offsets, instants, and for every factor the level index of each
//! row), read in one pass over the (characteristic, time) primary key.
//!
//! Level sets are immutable once written, so the levels of each level set are cached in the
//! `Store` (`LevelCache`), fetched in bulk for the sets a frame needs that are not cached yet, and
//! resolved once per level set of the frame, not per row: the per-row work is one hash look-up
//! and one push per factor.

use crate::ingest::fxhash::FxMap;

use chrono::{DateTime, Utc};

use crate::config::CharacteristicConfig;
use crate::names::{unknown_name, NameKind};
use crate::stats::decimal::Decimal;
use crate::{Error, Result};

use super::master::{
    level_set_key_ids, load_characteristics, load_factors, StoredCharacteristic, StoredFactor,
};
use super::Store;

/// The level shown for a factor a measurement has no level of (it was imported before the factor
/// was added to the configuration).
pub const NO_LEVEL: &str = "(none)";

/// One factor's levels in a [`PeriodFrame`], sorted by name (digit runs compared as numbers, so
/// `M2` comes before `M10`).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct FactorLevels {
    /// Factor name.
    pub name: String,
    /// The levels that occur in the frame.
    pub levels: Vec<String>,
}

/// The measurements of one characteristic in a period, columnar, in time order.
#[derive(Debug, Clone, PartialEq)]
pub struct CharacteristicFrame {
    /// Name, unit, limits and flags as stored.
    pub characteristic: CharacteristicConfig,
    /// The exact origin of `values` (zero when the characteristic has no values yet).
    pub origin: Decimal,
    /// Offsets from `origin`, one per measurement.
    pub values: Vec<f64>,
    /// Measurement instants, ms since the epoch (UTC).
    pub ts_ms: Vec<i64>,
    /// `level_idx[f][row]`: index into `PeriodFrame::factors[f].levels`.
    pub level_idx: Vec<Vec<u32>>,
    /// `subgroup_idx[row]`: the measurement's subgroup, numbered from 0 in order of first
    /// appearance in the frame ([`NO_SUBGROUP`] for a measurement without one). Empty when no
    /// measurement of the frame has a subgroup.
    pub subgroup_idx: Vec<u32>,
}

/// `CharacteristicFrame::subgroup_idx` of a measurement without a subgroup.
pub const NO_SUBGROUP: u32 = u32::MAX;

/// The measurements of a period: the configured factors with their levels, and one frame per
/// characteristic asked for.
#[derive(Debug, Clone, PartialEq)]
pub struct PeriodFrame {
    /// Configured factors, in configuration order.
    pub factors: Vec<FactorLevels>,
    /// One frame per characteristic, in the order asked for (all: the order they were added).
    pub characteristics: Vec<CharacteristicFrame>,
}

/// Level set id -> level id per configured factor (0: no level), plus level names.
#[derive(Debug, Default)]
pub(crate) struct LevelCache {
    factor_ids: Vec<i64>,
    /// Level set id -> where its level ids (one per configured factor) start in `members`.
    sets: IdIndex<usize>,
    members: Vec<i64>,
    /// Level id -> (factor id, name), for every level in the database when last read.
    levels: FxMap<i64, (i64, String)>,
}

/// Level sets fetched per query when filling the cache (SQLite's fixed-size `IN` list; a
/// backend may ask for another size with [`FrameBuilder::with_set_chunk`]).
const SET_CHUNK: usize = 256;

impl LevelCache {
    pub(crate) fn clear(&mut self) {
        *self = LevelCache::default();
    }
}

/// The exact value `origin + offset` for a characteristic whose values have at most `decimals`
/// decimal places (as stored in `characteristics.decimals`): the offset is rounded to that many
/// places, which recovers the digits of the input text exactly while the offset has fewer than
/// about 15 significant digits.
pub fn exact_value(origin: &Decimal, offset: f64, decimals: u32) -> Decimal {
    let scaled = (offset * 10f64.powi(decimals as i32)).round();
    let step = Decimal::from_parts(scaled as i128, decimals as i32);
    origin.checked_add(&step).unwrap_or(*origin)
}

/// Compares names with digit runs as numbers: `M2 < M10`.
pub(crate) fn natural_cmp(a: &str, b: &str) -> std::cmp::Ordering {
    let (mut x, mut y) = (a.as_bytes(), b.as_bytes());
    loop {
        match (x.first(), y.first()) {
            (None, None) => return a.cmp(b),
            (None, _) => return std::cmp::Ordering::Less,
            (_, None) => return std::cmp::Ordering::Greater,
            (Some(p), Some(q)) if p.is_ascii_digit() && q.is_ascii_digit() => {
                let nx = x.iter().take_while(|c| c.is_ascii_digit()).count();
                let ny = y.iter().take_while(|c| c.is_ascii_digit()).count();
                let (dx, dy) = (&x[..nx], &y[..ny]);
                let tx = dx.iter().skip_while(|c| **c == b'0').count();
                let ty = dy.iter().skip_while(|c| **c == b'0').count();
                let order = tx.cmp(&ty).then_with(|| dx[nx - tx..].cmp(&dy[ny - ty..]));
                if order != std::cmp::Ordering::Equal {
                    return order;
                }
                x = &x[nx..];
                y = &y[ny..];
            }
            (Some(p), Some(q)) => {
                if p != q {
                    return p.cmp(q);
                }
                x = &x[1..];
                y = &y[1..];
            }
        }
    }
}

/// The unknown-name error of a characteristic the database does not hold.
/// The stored characteristics a period read asks for, in the order asked (`None`: all, in
/// stored order); an unknown name is an error that lists the known ones. Both backends' reads.
pub(crate) fn choose_characteristics<'a>(
    stored: &'a [StoredCharacteristic],
    names: Option<&[String]>,
) -> Result<Vec<&'a StoredCharacteristic>> {
    match names {
        None => Ok(stored.iter().collect()),
        Some(names) => names
            .iter()
            .map(|n| {
                stored
                    .iter()
                    .find(|c| &c.config.name == n)
                    .ok_or_else(|| unknown_characteristic(n, stored))
            })
            .collect(),
    }
}

pub(crate) fn unknown_characteristic(name: &str, known: &[StoredCharacteristic]) -> Error {
    unknown_characteristic_among(name, known.iter().map(|c| c.config.name.as_str()))
}

/// [`unknown_characteristic`] from the known names alone.
pub(crate) fn unknown_characteristic_among<'a>(
    name: &str,
    known: impl IntoIterator<Item = &'a str> + Clone,
) -> Error {
    unknown_name(NameKind::Characteristic, name, known, "the database")
}

/// Builds a [`PeriodFrame`] from the rows of each characteristic, whatever the backend: the
/// per-row work is a push per column and, for a subgroup, one comparison with the previous
/// row's; level sets are resolved once per frame through the store's [`LevelCache`], fetched in
/// chunks of [`SET_CHUNK`] by the backend's `fetch_sets` when not cached.
pub(crate) struct FrameBuilder<'c> {
    factors: Vec<String>,
    cache: &'c mut LevelCache,
    frame_levels: FrameLevels,
    frames: Vec<CharacteristicFrame>,
    /// Subgroup ids numbered per frame; the previous row's id is checked first (the parts of
    /// one shot are neighbours in time order).
    subgroup_ids: FxMap<Box<[u8]>, u32>,
    last_subgroup: (Vec<u8>, u32),
    any_subgroup: bool,
    ts_ms: Vec<i64>,
    values: Vec<f64>,
    subgroup_idx: Vec<u32>,
    sets: Vec<i64>,
    missing: Vec<i64>,
    set_chunk: usize,
}

impl<'c> FrameBuilder<'c> {
    /// A builder for the configured `factors` (in configuration order); `cache` is the store's,
    /// reset when the configured factors changed since it was filled.
    pub(crate) fn new(factors: &[StoredFactor], cache: &'c mut LevelCache) -> FrameBuilder<'c> {
        let factor_ids: Vec<i64> = factors.iter().map(|f| f.id).collect();
        if cache.factor_ids != factor_ids {
            cache.clear();
            cache.factor_ids = factor_ids;
        }
        let n_factors = factors.len();
        FrameBuilder {
            factors: factors.iter().map(|f| f.name.clone()).collect(),
            cache,
            frame_levels: FrameLevels {
                n_factors,
                level_index: vec![IdIndex::default(); n_factors],
                level_order: vec![Vec::new(); n_factors],
                set_slot: IdIndex::default(),
                set_levels: Vec::new(),
            },
            frames: Vec::new(),
            subgroup_ids: FxMap::default(),
            last_subgroup: (Vec::new(), NO_SUBGROUP),
            any_subgroup: false,
            ts_ms: Vec::new(),
            values: Vec::new(),
            subgroup_idx: Vec::new(),
            sets: Vec::new(),
            missing: Vec::new(),
            set_chunk: SET_CHUNK,
        }
    }

    /// Asks `fetch_sets` for at most `n` level set ids at a time instead of [`SET_CHUNK`]
    /// (`usize::MAX`: all of a characteristic's uncached sets in one call).
    pub(crate) fn with_set_chunk(mut self, n: usize) -> FrameBuilder<'c> {
        self.set_chunk = n.max(1);
        self
    }

    /// Starts the next characteristic's frame.
    pub(crate) fn begin_characteristic(&mut self) {
        self.subgroup_ids.clear();
        self.last_subgroup = (Vec::new(), NO_SUBGROUP);
        self.any_subgroup = false;
        self.sets.clear();
    }

    /// One measurement, in time order: instant (ms), offset, level set id, subgroup id.
    #[inline]
    pub(crate) fn push(&mut self, ts_ms: i64, value: f64, set: i64, subgroup: Option<&[u8]>) {
        self.ts_ms.push(ts_ms);
        self.values.push(value);
        self.sets.push(set);
        let id = match subgroup {
            Some(t) => {
                if self.last_subgroup.1 != NO_SUBGROUP && self.last_subgroup.0 == t {
                    self.last_subgroup.1
                } else {
                    let next = self.subgroup_ids.len() as u32;
                    let id = *self.subgroup_ids.entry(t.into()).or_insert(next);
                    self.last_subgroup.0.clear();
                    self.last_subgroup.0.extend_from_slice(t);
                    self.last_subgroup.1 = id;
                    id
                }
            }
            None => NO_SUBGROUP,
        };
        if id != NO_SUBGROUP && !self.any_subgroup {
            self.any_subgroup = true;
            self.subgroup_idx.resize(self.values.len() - 1, NO_SUBGROUP);
        }
        if self.any_subgroup {
            self.subgroup_idx.push(id);
        }
    }

    /// Ends the frame of `c`: resolves its level sets (from the cache, or fetched: `fetch_sets`
    /// appends the (id, key) rows of a chunk of at most [`SET_CHUNK`] level set ids, or of the
    /// size set by [`FrameBuilder::with_set_chunk`]; it may append rows of other level sets as
    /// well, which are cached too; `read_levels` fills in every level with its factor and
    /// name).
    pub(crate) fn finish_characteristic(
        &mut self,
        c: &StoredCharacteristic,
        mut fetch_sets: impl FnMut(&[i64], &mut Vec<(i64, String)>) -> Result<()>,
        mut read_levels: impl FnMut(&mut FxMap<i64, (i64, String)>) -> Result<()>,
    ) -> Result<()> {
        let cache = &mut *self.cache;
        self.missing.clear();
        for &set in &self.sets {
            if self.frame_levels.set_slot.get(set).is_none() {
                match cache.sets.get(set) {
                    Some(start) => self.frame_levels.resolve(set, start, cache),
                    None => self.missing.push(set),
                }
            }
        }
        self.missing.sort_unstable();
        self.missing.dedup();
        if let Err(e) = fetch_level_sets(
            cache,
            &self.missing,
            self.set_chunk,
            &mut fetch_sets,
            &mut read_levels,
        ) {
            // The sets of the failed chunk were entered before their rows were read: drop the
            // cache rather than keep entries without members.
            cache.clear();
            return Err(e);
        }
        for &set in &self.missing {
            let start = cache.sets.get(set).expect("fetched above");
            self.frame_levels.resolve(set, start, cache);
        }
        let n_factors = self.factors.len();
        let mut level_idx: Vec<Vec<u32>> = vec![Vec::with_capacity(self.sets.len()); n_factors];
        for set in &self.sets {
            let levels = self.frame_levels.levels_of(*set);
            for (column, &level) in level_idx.iter_mut().zip(levels) {
                column.push(level);
            }
        }
        self.frames.push(CharacteristicFrame {
            characteristic: c.config.clone(),
            origin: c.origin.unwrap_or(Decimal::ZERO),
            values: std::mem::take(&mut self.values),
            ts_ms: std::mem::take(&mut self.ts_ms),
            level_idx,
            subgroup_idx: std::mem::take(&mut self.subgroup_idx),
        });
        Ok(())
    }

    /// The period's frame: each factor's levels sorted by name and the frames renumbered.
    pub(crate) fn finish(self) -> PeriodFrame {
        let FrameBuilder {
            factors,
            cache,
            frame_levels,
            mut frames,
            ..
        } = self;
        let mut factor_levels = Vec::with_capacity(factors.len());
        for (f, factor) in factors.into_iter().enumerate() {
            let names: Vec<String> = frame_levels.level_order[f]
                .iter()
                .map(|&id| match cache.levels.get(&id) {
                    Some((_, name)) if id != 0 => name.clone(),
                    _ => NO_LEVEL.to_string(),
                })
                .collect();
            let mut order: Vec<usize> = (0..names.len()).collect();
            order.sort_by(|&a, &b| natural_cmp(&names[a], &names[b]));
            let mut renumber = vec![0u32; names.len()];
            for (new, &old) in order.iter().enumerate() {
                renumber[old] = new as u32;
            }
            for frame in &mut frames {
                for i in frame.level_idx[f].iter_mut() {
                    *i = renumber[*i as usize];
                }
            }
            factor_levels.push(FactorLevels {
                name: factor,
                levels: order.iter().map(|&i| names[i].clone()).collect(),
            });
        }
        PeriodFrame {
            factors: factor_levels,
            characteristics: frames,
        }
    }
}

/// A map from database ids (rowids: allocated from 1 upwards, so dense) to small values: a
/// vector indexed by the id, with a hash map for ids too large or negative to index by (which
/// samewise never writes, but a database may hold). Resolving the level sets of a frame is a
/// few of these look-ups per row; as vector reads they cost a fraction of hash look-ups.
#[derive(Debug, Clone)]
struct IdIndex<V> {
    dense: Vec<Option<V>>,
    sparse: FxMap<i64, V>,
}

/// Ids below this are indexed by vector (at most 16M slots).
const DENSE_IDS: i64 = 1 << 24;

impl<V> Default for IdIndex<V> {
    fn default() -> Self {
        IdIndex {
            dense: Vec::new(),
            sparse: FxMap::default(),
        }
    }
}

impl<V: Copy> IdIndex<V> {
    fn get(&self, id: i64) -> Option<V> {
        if (0..DENSE_IDS).contains(&id) {
            self.dense.get(id as usize).copied().flatten()
        } else {
            self.sparse.get(&id).copied()
        }
    }

    fn insert(&mut self, id: i64, value: V) {
        if (0..DENSE_IDS).contains(&id) {
            let i = id as usize;
            if i >= self.dense.len() {
                self.dense.resize(i + 1, None);
            }
            self.dense[i] = Some(value);
        } else {
            self.sparse.insert(id, value);
        }
    }
}

/// The levels of one frame: each level set resolved once to the frame's level indices.
struct FrameLevels {
    n_factors: usize,
    /// Per factor: level id (0: no level) -> index in the frame's level list (assigned in
    /// first-seen order, re-sorted by name at the end).
    level_index: Vec<IdIndex<u32>>,
    /// Per factor: the level ids in first-seen order.
    level_order: Vec<Vec<i64>>,
    /// Level set id -> where its `n_factors` level indices start in `set_levels`.
    set_slot: IdIndex<usize>,
    set_levels: Vec<u32>,
}

impl FrameLevels {
    /// Assigns the frame's level indices to a level set held in `cache` from `start` on.
    fn resolve(&mut self, set: i64, start: usize, cache: &LevelCache) {
        let base = self.set_levels.len();
        for (f, &level) in cache.members[start..start + self.n_factors]
            .iter()
            .enumerate()
        {
            let order = &mut self.level_order[f];
            let i = match self.level_index[f].get(level) {
                Some(i) => i,
                None => {
                    let next = order.len() as u32;
                    order.push(level);
                    self.level_index[f].insert(level, next);
                    next
                }
            };
            self.set_levels.push(i);
        }
        self.set_slot.insert(set, base);
    }

    /// The frame's level index per factor of a resolved level set.
    fn levels_of(&self, set: i64) -> &[u32] {
        let base = self
            .set_slot
            .get(set)
            .expect("every set of the frame is resolved");
        &self.set_levels[base..base + self.n_factors]
    }
}

/// Puts the levels of each level set in `missing` (sorted, none cached yet) into the cache,
/// asking `fetch_sets` for `chunk` ids at a time. Rows of sets not asked for (a backend that
/// read every level set at once) are cached as well.
///
/// Each set is read as one `level_sets` row: its `key` lists the member level ids, the same ones
/// as its `level_set_members` rows (both are written together by the import, and `samewise db
/// check` verifies that they agree), and each level belongs to one factor. One row per set
/// instead of one per member makes a cold read of a characteristic-day several times cheaper.
pub(crate) fn fetch_level_sets(
    cache: &mut LevelCache,
    missing: &[i64],
    chunk: usize,
    fetch_sets: &mut impl FnMut(&[i64], &mut Vec<(i64, String)>) -> Result<()>,
    read_levels: &mut impl FnMut(&mut FxMap<i64, (i64, String)>) -> Result<()>,
) -> Result<()> {
    if missing.is_empty() {
        return Ok(());
    }
    let n_factors = cache.factor_ids.len();
    let mut levels_read = false;
    let mut rows: Vec<(i64, String)> = Vec::with_capacity(chunk.min(missing.len()));
    let mut at = 0;
    while at < missing.len() {
        // Every set of the chunk gets an entry, even one without members of configured factors;
        // sets that an earlier chunk's extra rows cached already are not asked for again.
        let mut asked = Vec::with_capacity(chunk.min(missing.len() - at));
        while at < missing.len() && asked.len() < chunk {
            let set = missing[at];
            at += 1;
            if cache.sets.get(set).is_none() {
                cache.sets.insert(set, cache.members.len());
                cache.members.resize(cache.members.len() + n_factors, 0);
                asked.push(set);
            }
        }
        if asked.is_empty() {
            break;
        }
        rows.clear();
        fetch_sets(&asked, &mut rows)?;
        for (set, key) in &rows {
            let (set, key) = (*set, key.as_str());
            let start = match cache.sets.get(set) {
                Some(start) => start,
                None => {
                    // A set not asked for: cached as well.
                    let start = cache.members.len();
                    cache.sets.insert(set, start);
                    cache.members.resize(start + n_factors, 0);
                    start
                }
            };
            for level_id in level_set_key_ids(key) {
                let level_id = level_id.ok_or_else(|| bad_key(set, key))?;
                if !cache.levels.contains_key(&level_id) && !levels_read {
                    read_levels(&mut cache.levels)?;
                    levels_read = true;
                }
                let Some(&(factor_id, _)) = cache.levels.get(&level_id) else {
                    return Err(bad_key(set, key));
                };
                if let Some(f) = cache.factor_ids.iter().position(|&id| id == factor_id) {
                    cache.members[start + f] = level_id;
                }
            }
        }
    }
    Ok(())
}

/// Every level with its factor and name.
fn read_levels(conn: &rusqlite::Connection, levels: &mut FxMap<i64, (i64, String)>) -> Result<()> {
    let mut stmt = conn.prepare_cached("SELECT id, factor_id, name FROM levels")?;
    let mut rows = stmt.query([])?;
    while let Some(row) = rows.next()? {
        levels.insert(row.get(0)?, (row.get(1)?, row.get(2)?));
    }
    Ok(())
}

fn bad_key(set: i64, key: &str) -> Error {
    Error::Database(format!(
        "level set {set} has the key {key:?}, which does not list known level ids; \
         run `samewise db check`"
    ))
}

/// The measurements and their master data (characteristics, factors, levels), as the analysis
/// reads them: what a second backend implements. Every method reads only. Instants are UTC;
/// a period is `[start, end)`. Consistency across one call: imports commit whole files, so a
/// file is seen completely or not at all by each statement; the SQLite implementation runs a
/// call's statements (master data, then rows) without one enclosing read transaction, so an
/// import that commits between them can add rows whose new levels the call's master data lack
/// (such rows read as "(none)"); one read transaction per call is the stronger contract a
/// backend should aim for (not yet kept here).
pub trait MeasurementStore {
    /// Every stored characteristic (active or not) with its exact origin, in id order (the order
    /// they were first configured or imported); empty for a new database.
    fn characteristics(&self) -> Result<Vec<StoredCharacteristic>>;
    /// Every stored factor with its levels, in id order; empty when none is configured.
    fn factors(&self) -> Result<Vec<StoredFactor>>;
    /// Measurements per stored characteristic in `[start, end)`, one entry per characteristic
    /// in the order of [`MeasurementStore::characteristics`], `0` for one without any.
    fn count_between(&self, start: DateTime<Utc>, end: DateTime<Utc>)
        -> Result<Vec<(String, u64)>>;
    /// Whether any measurement of any characteristic lies in `[start, end)`.
    fn has_data_between(&self, start: DateTime<Utc>, end: DateTime<Utc>) -> Result<bool>;
    /// The measurements in `[start, end)` of the characteristics named (all stored ones when
    /// `None`), columnar, each characteristic's values in time order (ties in storage order),
    /// with every value's exact decimal origin and its level per configured factor.
    ///
    /// An unknown name is a usage error that suggests the closest known one; a characteristic
    /// without measurements in the period gives an empty frame (never an error). This is the
    /// hot path of every check: one pass per characteristic, no per-row allocation.
    fn load_period(
        &self,
        start: DateTime<Utc>,
        end: DateTime<Utc>,
        characteristics: Option<&[String]>,
    ) -> Result<PeriodFrame>;
    /// Levels of a factor that differ only in letter case ("A7" and "a7"), per factor; empty
    /// when there are none.
    fn level_case_collisions(&self) -> Result<Vec<(String, Vec<String>)>>;
    /// A way to open a second, independent reader of the same data, to be called on another
    /// thread (the check loads parts of a period on two threads); `None` when the backend
    /// cannot (an in-memory database), and then the caller loads everything itself. The second
    /// reader only reads: it runs no migration and writes nothing (not even a setting), and it
    /// refuses a database whose schema is not the one this build reads. It may see later
    /// commits than this one; a check reads only periods that are already imported.
    fn reader_opener(&self) -> Option<ReaderOpener>;
}

/// Opens a second reader of a store (see [`MeasurementStore::reader_opener`]).
pub type ReaderOpener = Box<dyn FnOnce() -> Result<Box<dyn MeasurementStore + Send>> + Send>;

impl MeasurementStore for Store {
    fn characteristics(&self) -> Result<Vec<StoredCharacteristic>> {
        Store::characteristics(self)
    }
    fn factors(&self) -> Result<Vec<StoredFactor>> {
        Store::factors(self)
    }
    fn count_between(
        &self,
        start: DateTime<Utc>,
        end: DateTime<Utc>,
    ) -> Result<Vec<(String, u64)>> {
        let stored = load_characteristics(&self.conn)?;
        let mut stmt = self.conn.prepare_cached(
            "SELECT COUNT(*) FROM measurements WHERE characteristic_id = ?1 \
             AND ts_ms >= ?2 AND ts_ms < ?3",
        )?;
        stored
            .iter()
            .map(|c| {
                let n: i64 = stmt.query_row(
                    rusqlite::params![c.id, start.timestamp_millis(), end.timestamp_millis()],
                    |r| r.get(0),
                )?;
                Ok((c.config.name.clone(), n as u64))
            })
            .collect()
    }
    fn has_data_between(&self, start: DateTime<Utc>, end: DateTime<Utc>) -> Result<bool> {
        let stored = load_characteristics(&self.conn)?;
        let mut stmt = self.conn.prepare_cached(
            "SELECT EXISTS (SELECT 1 FROM measurements WHERE characteristic_id = ?1 \
             AND ts_ms >= ?2 AND ts_ms < ?3)",
        )?;
        for c in &stored {
            let found: bool = stmt.query_row(
                rusqlite::params![c.id, start.timestamp_millis(), end.timestamp_millis()],
                |r| r.get(0),
            )?;
            if found {
                return Ok(true);
            }
        }
        Ok(false)
    }
    fn load_period(
        &self,
        start: DateTime<Utc>,
        end: DateTime<Utc>,
        characteristics: Option<&[String]>,
    ) -> Result<PeriodFrame> {
        let stored = load_characteristics(&self.conn)?;
        let chosen = choose_characteristics(&stored, characteristics)?;
        let factors: Vec<_> = load_factors(&self.conn)?
            .into_iter()
            .filter(|f| f.is_configured)
            .collect();
        let mut cache = self.level_cache.borrow_mut();
        let mut builder = FrameBuilder::new(&factors, &mut cache);
        let mut rows_stmt = self.conn.prepare_cached(
            "SELECT ts_ms, value, level_set_id, subgroup FROM measurements \
             WHERE characteristic_id = ?1 AND ts_ms >= ?2 AND ts_ms < ?3",
        )?;
        let mut set_stmt = self.conn.prepare_cached(&format!(
            "SELECT id, key FROM level_sets WHERE id IN ({})",
            vec!["?"; SET_CHUNK].join(", ")
        ))?;
        for c in chosen {
            builder.begin_characteristic();
            let mut rows = rows_stmt.query(rusqlite::params![
                c.id,
                start.timestamp_millis(),
                end.timestamp_millis()
            ])?;
            while let Some(row) = rows.next()? {
                let subgroup = match row.get_ref(3)? {
                    rusqlite::types::ValueRef::Text(t) => Some(t),
                    _ => None,
                };
                builder.push(row.get(0)?, row.get(1)?, row.get(2)?, subgroup);
            }
            drop(rows);
            builder.finish_characteristic(
                c,
                |chunk, out| {
                    // A short last chunk repeats its last id (IN ignores repeats).
                    let ids = (0..SET_CHUNK).map(|i| chunk[i.min(chunk.len() - 1)]);
                    let mut rows = set_stmt.query(rusqlite::params_from_iter(ids))?;
                    while let Some(row) = rows.next()? {
                        let set: i64 = row.get(0)?;
                        let key = row
                            .get_ref(1)?
                            .as_str()
                            .map_err(|_| bad_key(set, "(not text)"))?;
                        out.push((set, key.to_string()));
                    }
                    Ok(())
                },
                |levels| read_levels(&self.conn, levels),
            )?;
        }
        Ok(builder.finish())
    }
    fn level_case_collisions(&self) -> Result<Vec<(String, Vec<String>)>> {
        Store::level_case_collisions(self)
    }
    fn reader_opener(&self) -> Option<ReaderOpener> {
        let path = self.path.clone()?;
        Some(Box::new(move || {
            Store::open_reader(&path).map(|s| Box::new(s) as Box<dyn MeasurementStore + Send>)
        }))
    }
}

#[cfg(test)]
pub(crate) mod testing {
    use super::LevelCache;

    /// How many level sets `cache` holds.
    pub(crate) fn cached_sets(cache: &LevelCache) -> usize {
        cache.members.len() / cache.factor_ids.len().max(1)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn id_index_holds_dense_negative_and_huge_ids() {
        let mut index = IdIndex::default();
        for (id, value) in [
            (1, 10u32),
            (7, 70),
            (-3, 30),
            (DENSE_IDS + 5, 50),
            (i64::MAX, 90),
        ] {
            index.insert(id, value);
        }
        index.insert(7, 71);
        assert_eq!(index.get(1), Some(10));
        assert_eq!(index.get(7), Some(71));
        assert_eq!(index.get(-3), Some(30));
        assert_eq!(index.get(DENSE_IDS + 5), Some(50));
        assert_eq!(index.get(i64::MAX), Some(90));
        for absent in [0, 2, 8, 1_000, -1, DENSE_IDS, i64::MIN] {
            assert_eq!(index.get(absent), None, "{absent}");
        }
        assert_eq!(
            index.dense.len(),
            8,
            "the vector grows only to the largest dense id"
        );
    }

    #[test]
    fn natural_order_compares_numbers() {
        let mut names = vec!["M10", "M2", "M1", "A"];
        names.sort_by(|a, b| natural_cmp(a, b));
        assert_eq!(names, ["A", "M1", "M2", "M10"]);
    }

    #[test]
    fn the_second_reader_is_read_only_and_never_migrates() {
        let dir = std::env::temp_dir().join(format!("samewise-reader-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&dir);
        std::fs::create_dir_all(&dir).unwrap();
        let db = dir.join("plant.db");
        let store = Store::open_or_create(&db).unwrap();
        // At the current schema: a working reader whose connection cannot write.
        let opener = store
            .reader_opener()
            .expect("a file database has a second reader");
        let reader = opener().unwrap();
        assert!(reader.characteristics().unwrap().is_empty());
        let direct = Store::open_reader(&db).unwrap();
        assert!(direct
            .conn
            .is_readonly(rusqlite::DatabaseName::Main)
            .unwrap());
        assert!(direct
            .conn
            .execute("DELETE FROM characteristics", [])
            .is_err());
        drop(direct);
        // A database behind this build's schema: refused, and left as it was (no migration).
        let behind = crate::storage::migrate::latest_version() - 1;
        store
            .conn
            .pragma_update(None, "user_version", behind)
            .unwrap();
        let err = store.reader_opener().unwrap()().err().unwrap().to_string();
        assert!(err.contains("does not migrate"), "{err}");
        assert_eq!(
            crate::storage::migrate::schema_version(&store.conn).unwrap(),
            behind
        );
        drop(store);
        std::fs::remove_dir_all(&dir).unwrap();
    }

    #[test]
    fn exact_value_recovers_the_digits() {
        let origin = Decimal::parse("1000000000000.4").unwrap();
        let v = Decimal::parse("1000000000000.3").unwrap();
        let back = exact_value(&origin, v.offset_from(&origin), 1);
        assert_eq!(back.to_string(), "1000000000000.3");
    }
}
