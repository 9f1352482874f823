//! Reading CSV exports (long and wide layouts) into measurements, with every rejected row kept
//! together with its line, column and reason.
//!
//! Start reading at [`read_file`]. It opens the file, reads the header line, picks the layout
//! (by name, or the one configured layout whose columns the header matches best), and returns an
//! [`ImportStream`]: an iterator of [`RowOutcome`]s that reads the file line by line in constant
//! memory (at most one line of [`MAX_LINE_BYTES`] is held), hashing the bytes with SHA-256 as
//! they pass so that [`ImportStream::file_sha256`] is known at the end without a second read
//! ([`file_sha256`] computes it up front when a caller needs it before importing).
//!
//! This module does no SQL and keeps nothing: storage decides what to do with the outcomes.
//!
//! # The file format
//! - UTF-8, with or without a byte-order mark; a UTF-16 file is refused as a whole. Bytes that
//!   are not UTF-8 (a Latin-1 export, say) reject the cell they are in.
//! - Lines end in `\n` or `\r\n`. One physical line is one row: a quoted field may contain the
//!   delimiter and doubled quotes (`"a ""b"", c"`), but not a line break (a quote still open at
//!   the end of the line rejects that line with "quoted field is not closed"). This keeps every
//!   line number exact and the memory bounded even when a quote is never closed.
//! - The first line is the header. Column names are matched after trimming spaces, ignoring
//!   ASCII case. The delimiter is the layout's (`,` by default).
//! - Cells are trimmed of surrounding spaces. Values go through
//!   [`crate::stats::decimal::Decimal::parse`], which keeps every digit; `1,5`, `1e400`, `NaN`,
//!   `-` and `12.5 mm` are rejected with a reason.
//! - Timestamps: see [`timestamp`]. Local times that do not exist or occur twice at a DST change
//!   are rejected, never guessed.
//! - A derived `shift` factor is computed from the timestamp with the plant calendar.
//!
//! # Counting: what "rows read" means
//! Every physical line after the header is a *row read*, blank lines included: a blank line (empty
//! or only spaces and tabs) is a rejected row with the reason "blank line", so nothing is skipped
//! silently. The unit of the outcomes is the *measurement*:
//! - in a long file each row holds one measurement and yields exactly one outcome;
//! - in a wide file each row holds one measurement per characteristic column and yields exactly
//!   that many outcomes. A problem with one cell rejects that cell only; a problem with the whole
//!   row (blank line, wrong number of fields, bad timestamp or factor cell, an over-long line)
//!   rejects every measurement of the row in one [`Rejection`] whose `measurements` is the
//!   number of characteristic columns; its `column` is the column at fault (the timestamp or
//!   factor column) when there is one, otherwise none (every characteristic column). One bad
//!   row is one record, however wide the file.
//!
//! Timestamps outside the years 1900 to 2200 are rejected as clock or format errors.
//!
//! Hence always `accepted + rejected == measurements_read == rows_read x cells_per_row`
//! ([`Counts`]), where `cells_per_row` is 1 for long files and `rejected` is the sum of the
//! rejections' `measurements`.

pub(crate) mod fxhash;
pub mod timestamp;

use std::collections::{HashSet, VecDeque};
use std::fs::File;
use std::io::{BufRead, BufReader, Read};
use std::path::{Path, PathBuf};

use chrono::{DateTime, Utc};
use sha2::{Digest, Sha256};

use crate::calendar::{PlantCalendar, ShiftTable};
use crate::config::{check_name, Config, Layout, LayoutKind, LevelCase, SubgroupSource};
use crate::stats::decimal::Decimal;
use crate::{Error, Result};

use fxhash::{FxMap, FxSet};
use timestamp::{shorten, TimestampParser};

/// Longest line read; a longer line is rejected (its bytes are still hashed) and reading
/// continues with the next line.
pub const MAX_LINE_BYTES: usize = 1 << 20;

/// Longest `Rejection::raw` kept, in characters (the rest is cut and marked).
pub const MAX_RAW_CHARS: usize = 1000;

/// One accepted measurement.
#[derive(Debug, Clone, PartialEq)]
pub struct Measurement {
    /// 1-based line of the file (the header is line 1).
    pub line: u64,
    /// Characteristic name (a configured one, or a new one when `add_new` is set).
    pub characteristic: String,
    /// Instant of the measurement.
    pub ts: DateTime<Utc>,
    /// The value, exactly as written.
    pub value: Decimal,
    /// One level per `Config::factors`, in order.
    pub levels: Vec<String>,
    /// The part (serial) id, when the layout has a part column.
    pub part: Option<String>,
    /// The subgroup (shot, sample, batch) id, when the layout names or derives one.
    pub subgroup: Option<String>,
}

/// One rejected measurement (or a whole rejected row of a long file).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Rejection {
    /// 1-based line of the file.
    pub line: u64,
    /// The column (as named in the header) the problem is in, when it is in one.
    pub column: Option<String>,
    /// What is wrong and, when one exists, the fix.
    pub reason: String,
    /// The offending text: the whole line (long files and row-level problems) or the cell (a
    /// wide file's cell), lossily decoded, at most [`MAX_RAW_CHARS`] characters.
    pub raw: String,
    /// The measurements this rejection stands for: 1 for a long file's row or a wide file's
    /// cell, every characteristic column of a wide row rejected as a whole.
    pub measurements: u64,
}

/// What became of one measurement of the file.
#[derive(Debug, Clone, PartialEq)]
pub enum RowOutcome {
    /// Read and valid.
    Accepted(Measurement),
    /// Not usable, with the reason.
    Rejected(Rejection),
}

/// Options of [`read_file_with`].
#[derive(Debug, Clone, Default)]
pub struct ReadOptions {
    /// Layout name; `None` detects it from the header.
    pub layout: Option<String>,
    /// Accept characteristic names not in the configuration (they become new characteristics).
    pub add_new: bool,
}

/// Running counts of a stream (see the module docs for the units).
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Counts {
    /// Lines after the header, blank lines included.
    pub rows_read: u64,
    /// Of those, blank lines (each also counted in `rejected`, once per cell of the row).
    pub blank_rows: u64,
    /// Measurements per row: 1 for long files, the number of characteristic columns for wide.
    pub cells_per_row: u64,
    /// Outcomes produced so far (`accepted + rejected`).
    pub measurements_read: u64,
    /// Accepted measurements.
    pub accepted: u64,
    /// Rejected measurements.
    pub rejected: u64,
}

/// The SHA-256 of a file's bytes, as 64 lowercase hex digits (a separate read of the file).
pub fn file_sha256(path: impl AsRef<Path>) -> Result<String> {
    let path = path.as_ref();
    let mut file = File::open(path).map_err(|e| Error::io(path, e))?;
    let mut hasher = Sha256::new();
    let mut buf = vec![0u8; 1 << 20];
    loop {
        let n = file.read(&mut buf).map_err(|e| Error::io(path, e))?;
        if n == 0 {
            break;
        }
        hasher.update(&buf[..n]);
    }
    Ok(hex(&hasher.finalize()))
}

/// Opens `path` and reads it with `layout` (a name) or the layout detected from the header.
/// Unknown characteristics are rejected (see [`read_file_with`] for `add_new`).
pub fn read_file(
    path: impl AsRef<Path>,
    config: &Config,
    layout: Option<&str>,
) -> Result<ImportStream<Box<dyn Read + Send>>> {
    read_file_with(
        path,
        config,
        &ReadOptions {
            layout: layout.map(str::to_string),
            add_new: false,
        },
    )
}

/// [`read_file`] with all options.
pub fn read_file_with(
    path: impl AsRef<Path>,
    config: &Config,
    options: &ReadOptions,
) -> Result<ImportStream<Box<dyn Read + Send>>> {
    let path = path.as_ref();
    let file = File::open(path).map_err(|e| Error::io(path, e))?;
    // Boxed, so the stream goes to any store backend (`storage::ImportStore`); the stream reads
    // 64 KiB at a time, so the indirection costs nothing measurable.
    read_from(Box::new(file), path, config, options)
}

/// Reads CSV from any reader; `path` names it in messages. Fails as a whole only when the header
/// cannot be used (no header, not UTF-8, UTF-16, no layout fits, an I/O error).
pub fn read_from<R: Read>(
    reader: R,
    path: impl AsRef<Path>,
    config: &Config,
    options: &ReadOptions,
) -> Result<ImportStream<R>> {
    let path = path.as_ref().to_path_buf();
    let mut lines = LineReader::new(reader);
    let file_error = |line: Option<u64>, reason: String| Error::Ingest {
        path: path.clone(),
        line,
        column: None,
        reason,
    };
    let header = match lines.next_line().map_err(|e| Error::io(&path, e))? {
        None => {
            return Err(file_error(
                None,
                "the file is empty (no header line)".to_string(),
            ))
        }
        Some(LineRead::TooLong { .. }) => {
            return Err(file_error(
                Some(1),
                format!("the header line is longer than {MAX_LINE_BYTES} bytes"),
            ))
        }
        Some(LineRead::Line) => lines.line.clone(),
    };
    let mut header_bytes: &[u8] = &header;
    if header_bytes.starts_with(&[0xEF, 0xBB, 0xBF]) {
        header_bytes = &header_bytes[3..];
    }
    if header_bytes.starts_with(&[0xFF, 0xFE]) || header_bytes.starts_with(&[0xFE, 0xFF]) {
        return Err(file_error(
            Some(1),
            "the file is UTF-16; save it as UTF-8 (with or without BOM)".to_string(),
        ));
    }
    let header_text = std::str::from_utf8(header_bytes).map_err(|_| {
        file_error(
            Some(1),
            "the header line is not UTF-8; save the file as UTF-8".to_string(),
        )
    })?;
    if header_text.trim().is_empty() {
        return Err(file_error(
            Some(1),
            "line 1 is blank; the first line must be the header".to_string(),
        ));
    }

    let candidates: Vec<&Layout> = match &options.layout {
        Some(name) => vec![config.layout(name).ok_or_else(|| {
            let names: Vec<&str> = config.layouts.iter().map(|l| l.name.as_str()).collect();
            Error::Usage(format!(
                "layout \"{name}\" is not configured (layouts: {})",
                names.join(", ")
            ))
        })?],
        None => config.layouts.iter().collect(),
    };
    let mut plans = Vec::new();
    let mut misfits = Vec::new();
    for layout in &candidates {
        let sniffed;
        let layout: &Layout = if layout.delimiter_auto {
            let mut l = (*layout).clone();
            l.delimiter = sniff_delimiter(header_text.as_bytes(), l.decimal_comma);
            sniffed = l;
            &sniffed
        } else {
            layout
        };
        let mut fields = Vec::new();
        let mut buf = Vec::new();
        let columns: Vec<String> = match split_fields(
            header_text.as_bytes(),
            layout.delimiter,
            &mut buf,
            &mut fields,
        ) {
            Ok(()) => field_slices(&buf, &fields)
                .map(|f| String::from_utf8_lossy(f).trim().to_string())
                .collect(),
            Err(reason) => {
                misfits.push(format!("{}: header: {reason}", layout.name));
                continue;
            }
        };
        match Plan::new(layout, &columns, config, options.add_new) {
            Ok(plan) => plans.push(plan),
            Err(reason) => misfits.push(format!("layout \"{}\": {reason}", layout.name)),
        }
    }
    let plan = match plans.len() {
        0 => {
            let hint = if !header_text.contains(',') && header_text.contains(';') {
                " (the header is separated by ';': set delimiter = \";\" in the layout)"
            } else {
                ""
            };
            return Err(file_error(
                Some(1),
                format!("the header fits no layout{hint}: {}", misfits.join("; ")),
            ));
        }
        1 => plans.pop().expect("one plan"),
        _ => {
            plans.sort_by_key(|p| std::cmp::Reverse(p.score));
            if plans[0].score == plans[1].score {
                let names: Vec<&str> = plans
                    .iter()
                    .filter(|p| p.score == plans[0].score)
                    .map(|p| p.layout.name.as_str())
                    .collect();
                return Err(file_error(
                    Some(1),
                    format!(
                        "the header fits several layouts equally well ({}); choose one with --layout",
                        names.join(", ")
                    ),
                ));
            }
            plans.swap_remove(0)
        }
    };
    let ts_parser = TimestampParser::new(
        plan.layout.timestamp_format.as_deref(),
        config.plant.time_zone,
    )
    .map_err(|r| file_error(None, r))?;
    let counts = Counts {
        cells_per_row: plan.cells_per_row() as u64,
        ..Counts::default()
    };
    let has_shift = plan.factors.iter().any(|f| matches!(f, FactorCell::Shift));
    Ok(ImportStream {
        path,
        lines,
        rows: RowParser {
            plan,
            calendar: PlantCalendar::new(config),
            ts_parser,
            known: config
                .characteristics
                .iter()
                .map(|c| c.name.clone())
                .collect(),
            plausible: config
                .characteristics
                .iter()
                .filter_map(|c| c.plausible_range().map(|r| (c.name.clone(), r)))
                .collect(),
            add_new: options.add_new,
            level_case: config.factors.iter().map(|f| f.case).collect(),
            has_shift,
            shift_cache: None,
            blank_rows: 0,
            fields: Vec::new(),
            field_buf: Vec::new(),
        },
        pending: VecDeque::new(),
        counts,
        sha256: None,
        error: None,
        is_done: false,
    })
}

/// Where each factor's level comes from in one file.
#[derive(Debug, Clone)]
enum FactorCell {
    Column(usize),
    Shift,
}

#[derive(Debug, Clone)]
enum PlanKind {
    Long {
        characteristic: usize,
        value: usize,
    },
    /// `(column index, characteristic name, is known)`.
    Wide {
        cells: Vec<(usize, String, bool)>,
    },
}

/// A layout's subgroup applied to one header.
#[derive(Debug, Clone)]
enum PlanSubgroup {
    /// The cells of these columns, joined with "/".
    Columns(Vec<usize>),
    /// Levels of these factors (indices into the row's levels) and the clock window.
    Window { window_ms: i64, by: Vec<usize> },
}

/// A layout applied to one header.
#[derive(Debug, Clone)]
struct Plan {
    layout: Layout,
    columns: Vec<String>,
    timestamp: usize,
    factors: Vec<FactorCell>,
    /// The part id column, when the layout has one.
    part: Option<usize>,
    /// Where the subgroup id comes from, when the layout has one.
    subgroup: Option<PlanSubgroup>,
    kind: PlanKind,
    ignored: Vec<String>,
    /// How much of the header the layout explains (for detection).
    score: usize,
}

impl Plan {
    fn new(
        layout: &Layout,
        columns: &[String],
        config: &Config,
        add_new: bool,
    ) -> std::result::Result<Plan, String> {
        let find = |name: &str| columns.iter().position(|c| c.eq_ignore_ascii_case(name));
        let mut missing = Vec::new();
        let mut used: HashSet<usize> = HashSet::new();
        let mut need = |name: &str, missing: &mut Vec<String>| -> usize {
            match find(name) {
                Some(i) => {
                    used.insert(i);
                    i
                }
                None => {
                    missing.push(format!("\"{name}\""));
                    usize::MAX
                }
            }
        };
        let timestamp = need(&layout.timestamp_column, &mut missing);
        let part = layout.part_column.as_deref().map(|c| need(c, &mut missing));
        let subgroup = match &layout.subgroup {
            None => None,
            Some(SubgroupSource::Columns(columns)) => Some(PlanSubgroup::Columns(
                columns.iter().map(|c| need(c, &mut missing)).collect(),
            )),
            Some(SubgroupSource::Window { window_ms, by }) => Some(PlanSubgroup::Window {
                window_ms: *window_ms,
                by: by.clone(),
            }),
        };
        let mut factors = Vec::new();
        for column in &layout.factor_columns {
            factors.push(match column {
                Some(c) => FactorCell::Column(need(c, &mut missing)),
                None => FactorCell::Shift,
            });
        }
        let kind = match &layout.kind {
            LayoutKind::Long {
                characteristic_column,
                value_column,
            } => PlanKind::Long {
                characteristic: need(characteristic_column, &mut missing),
                value: need(value_column, &mut missing),
            },
            LayoutKind::Wide {
                characteristic_columns,
            } => {
                let mut cells = Vec::new();
                if characteristic_columns.is_empty() {
                    for (i, col) in columns.iter().enumerate() {
                        let is_other = used.contains(&i)
                            || layout.ignore.iter().any(|c| c.eq_ignore_ascii_case(col));
                        if is_other {
                            continue;
                        }
                        let known = config.characteristic(col).is_some();
                        cells.push((i, col.clone(), known));
                    }
                } else {
                    for (name, col) in characteristic_columns {
                        if let Some(i) = find(col) {
                            cells.push((i, name.clone(), true));
                        }
                    }
                }
                let has_usable = cells.iter().any(|c| c.2) || (add_new && !cells.is_empty());
                if !has_usable {
                    missing.push("a column of a configured characteristic".to_string());
                }
                PlanKind::Wide { cells }
            }
        };
        if !missing.is_empty() {
            return Err(format!("missing column {}", missing.join(", ")));
        }
        // Duplicate names in the header make a used column ambiguous.
        for (i, c) in columns.iter().enumerate() {
            if columns[..i].iter().any(|o| o.eq_ignore_ascii_case(c)) {
                let is_used = match &kind {
                    PlanKind::Long { .. } => {
                        used.contains(&i) || find(c).is_some_and(|j| used.contains(&j))
                    }
                    PlanKind::Wide { cells } => {
                        used.contains(&i)
                            || cells.iter().any(|x| columns[x.0].eq_ignore_ascii_case(c))
                    }
                };
                if is_used {
                    return Err(format!("column \"{c}\" appears twice in the header"));
                }
            }
            if c.is_empty() && used.contains(&i) {
                return Err("a used column has an empty name".to_string());
            }
        }
        let mut score = used.len();
        if let PlanKind::Wide { cells } = &kind {
            for (i, _, known) in cells {
                if *known {
                    used.insert(*i);
                }
            }
            score = used.len();
        }
        let wide_cols: HashSet<usize> = match &kind {
            PlanKind::Wide { cells } => cells.iter().map(|c| c.0).collect(),
            PlanKind::Long { .. } => HashSet::new(),
        };
        let ignored = columns
            .iter()
            .enumerate()
            .filter(|(i, _)| !used.contains(i) && !wide_cols.contains(i))
            .map(|(_, c)| c.clone())
            .collect();
        Ok(Plan {
            layout: layout.clone(),
            columns: columns.to_vec(),
            timestamp,
            factors,
            part,
            subgroup,
            kind,
            ignored,
            score,
        })
    }

    fn cells_per_row(&self) -> usize {
        match &self.kind {
            PlanKind::Long { .. } => 1,
            PlanKind::Wide { cells } => cells.len(),
        }
    }
}

/// One accepted measurement borrowed from the line being read: what [`ImportStream::read_into`]
/// hands to an [`OutcomeSink`], so that a caller that interns names needs no allocation per row.
#[derive(Debug, Clone, Copy)]
pub struct MeasurementRef<'a> {
    /// 1-based line of the file (the header is line 1).
    pub line: u64,
    /// Characteristic name (a configured one, or a new one when `add_new` is set).
    pub characteristic: &'a str,
    /// Instant of the measurement.
    pub ts: DateTime<Utc>,
    /// The value, exactly as written.
    pub value: Decimal,
    /// One level per `Config::factors`, in order.
    pub levels: &'a [&'a str],
    /// The part (serial) id, when the layout has a part column.
    pub part: Option<&'a str>,
    /// The subgroup (shot, sample, batch) id, when the layout names or derives one.
    pub subgroup: Option<&'a str>,
}

impl MeasurementRef<'_> {
    /// The owned [`Measurement`].
    pub fn to_measurement(&self) -> Measurement {
        Measurement {
            line: self.line,
            characteristic: self.characteristic.to_string(),
            ts: self.ts,
            value: self.value,
            levels: self.levels.iter().map(|l| l.to_string()).collect(),
            part: self.part.map(str::to_string),
            subgroup: self.subgroup.map(str::to_string),
        }
    }
}

/// Receives the outcomes of [`ImportStream::read_into`], in file order.
pub trait OutcomeSink {
    /// A valid measurement (borrowed: copy what is kept).
    fn accepted(&mut self, measurement: MeasurementRef<'_>);
    /// A rejected measurement.
    fn rejected(&mut self, rejection: Rejection);
}

/// Queues owned outcomes (the [`Iterator`] side of [`ImportStream`]).
struct Queue<'a>(&'a mut VecDeque<RowOutcome>);

impl OutcomeSink for Queue<'_> {
    fn accepted(&mut self, measurement: MeasurementRef<'_>) {
        self.0
            .push_back(RowOutcome::Accepted(measurement.to_measurement()));
    }

    fn rejected(&mut self, rejection: Rejection) {
        self.0.push_back(RowOutcome::Rejected(rejection));
    }
}

/// Counts what passes on to the inner sink.
struct Counting<'a, S> {
    sink: &'a mut S,
    counts: &'a mut Counts,
}

impl<S: OutcomeSink> OutcomeSink for Counting<'_, S> {
    fn accepted(&mut self, measurement: MeasurementRef<'_>) {
        self.counts.measurements_read += 1;
        self.counts.accepted += 1;
        self.sink.accepted(measurement);
    }

    fn rejected(&mut self, rejection: Rejection) {
        self.counts.measurements_read += rejection.measurements;
        self.counts.rejected += rejection.measurements;
        self.sink.rejected(rejection);
    }
}

/// The streaming reader returned by [`read_file`]: an iterator of [`RowOutcome`]s, or, without
/// an allocation per row, [`ImportStream::read_into`] with an [`OutcomeSink`]. Both give the
/// same outcomes in the same order (the iterator is `read_into` with a sink that copies).
///
/// After the iterator has returned `None` (or `read_into` `false`),
/// [`ImportStream::file_sha256`] is the hash of every byte of the file, unless an I/O error ended
/// the stream early: then [`ImportStream::take_error`] returns it and the hash stays `None` (the
/// caller must not commit a partial file).
pub struct ImportStream<R: Read = File> {
    path: PathBuf,
    lines: LineReader<R>,
    rows: RowParser,
    pending: VecDeque<RowOutcome>,
    counts: Counts,
    sha256: Option<String>,
    error: Option<Error>,
    is_done: bool,
}

/// Turns one line into outcomes: the plan, the calendar and the reusable buffers.
struct RowParser {
    plan: Plan,
    calendar: PlantCalendar,
    ts_parser: TimestampParser,
    known: FxSet<String>,
    /// Plausible range per configured characteristic (`CharacteristicConfig::plausible_range`).
    plausible: FxMap<String, (f64, f64)>,
    add_new: bool,
    /// Per factor (configuration order): its case normalisation.
    level_case: Vec<LevelCase>,
    has_shift: bool,
    shift_cache: Option<ShiftTable>,
    blank_rows: u64,
    fields: Vec<usize>,
    field_buf: Vec<u8>,
}

/// Levels held inline per row up to this many factors (more go to a vector).
const INLINE_LEVELS: usize = 8;

fn cell<'b>(buf: &'b [u8], ends: &[usize], i: usize) -> &'b [u8] {
    let start = if i == 0 { 0 } else { ends[i - 1] };
    &buf[start..ends[i]]
}

fn cell_text<'b>(buf: &'b [u8], ends: &[usize], i: usize) -> std::result::Result<&'b str, String> {
    std::str::from_utf8(trim_bytes(cell(buf, ends, i)))
        .map_err(|_| "cell is not UTF-8 text (save the file as UTF-8)".to_string())
}

impl<R: Read> ImportStream<R> {
    /// The file being read.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// The layout in use (named or detected).
    pub fn layout(&self) -> &Layout {
        &self.rows.plan.layout
    }

    /// The header's column names, trimmed.
    pub fn columns(&self) -> &[String] {
        &self.rows.plan.columns
    }

    /// Header columns that are not read (neither timestamp, factor nor characteristic).
    pub fn ignored_columns(&self) -> &[String] {
        &self.rows.plan.ignored
    }

    /// Counts so far (final once the stream has ended).
    pub fn counts(&self) -> Counts {
        Counts {
            blank_rows: self.rows.blank_rows,
            ..self.counts
        }
    }

    /// The SHA-256 of the file's bytes (64 lowercase hex digits), once the whole file was read.
    pub fn file_sha256(&self) -> Option<&str> {
        self.sha256.as_deref()
    }

    /// The I/O error that ended the stream early, if any.
    pub fn take_error(&mut self) -> Option<Error> {
        self.error.take()
    }

    /// Reads the next line and hands its outcomes to `sink` (none for no line, one per
    /// measurement of the row otherwise). `false` once the file has ended (or an I/O error ended
    /// it: see [`ImportStream::take_error`]); the counts then are final.
    ///
    /// Outcomes the iterator had read ahead but not yet returned go to `sink` first, so the two
    /// ways of reading can be mixed without losing or repeating an outcome.
    pub fn read_into<S: OutcomeSink>(&mut self, sink: &mut S) -> bool {
        while let Some(outcome) = self.pending.pop_front() {
            match outcome {
                RowOutcome::Accepted(m) => {
                    self.counts.measurements_read += 1;
                    self.counts.accepted += 1;
                    let levels: Vec<&str> = m.levels.iter().map(String::as_str).collect();
                    sink.accepted(MeasurementRef {
                        line: m.line,
                        characteristic: &m.characteristic,
                        ts: m.ts,
                        value: m.value,
                        levels: &levels,
                        part: m.part.as_deref(),
                        subgroup: m.subgroup.as_deref(),
                    });
                }
                RowOutcome::Rejected(r) => {
                    self.counts.measurements_read += r.measurements;
                    self.counts.rejected += r.measurements;
                    sink.rejected(r);
                }
            }
        }
        if self.is_done {
            return false;
        }
        let mut counting = Counting {
            sink,
            counts: &mut self.counts,
        };
        let more = read_row(
            &self.path,
            &mut self.lines,
            &mut self.rows,
            &mut self.sha256,
            &mut self.error,
            &mut counting,
        );
        if !more {
            self.is_done = true;
        }
        more
    }
}

/// Reads one line and hands its outcomes to `sink`. `false` at the end of the file (the hash is
/// then set) or on a read error (`error` is then set).
fn read_row<R: Read, S: OutcomeSink>(
    path: &Path,
    lines: &mut LineReader<R>,
    rows: &mut RowParser,
    sha256: &mut Option<String>,
    error: &mut Option<Error>,
    sink: &mut Counting<'_, S>,
) -> bool {
    let read = match lines.next_line() {
        Ok(Some(r)) => r,
        Ok(None) => {
            *sha256 = Some(hex(&lines.hasher.clone().finalize()));
            return false;
        }
        Err(e) => {
            *error = Some(Error::Ingest {
                path: path.to_path_buf(),
                line: Some(lines.line_no + 1),
                column: None,
                reason: format!("read error, the file was not read to the end: {e}"),
            });
            return false;
        }
    };
    sink.counts.rows_read += 1;
    rows.process_line(lines.line_no, &read, &lines.line, sink);
    true
}

impl RowParser {
    /// A value cell, with the layout's decimal separator.
    fn parse_cell_value(&self, text: &str) -> std::result::Result<Decimal, String> {
        if self.plan.layout.decimal_comma {
            parse_value_decimal_comma(text)
        } else {
            parse_value(text)
        }
    }

    /// `value` when it lies in the characteristic's plausible range (or none is known), else the
    /// reason naming the range and how to change it.
    fn check_plausible(&self, name: &str, value: Decimal) -> std::result::Result<Decimal, String> {
        match self.plausible.get(name) {
            Some(&(lo, hi)) if !(lo..=hi).contains(&value.to_f64()) => Err(format!(
                "value {value} is implausible for \"{}\": outside [{}, {}] (by default the limits widened by {} tolerance widths; set plausible = [lo, hi] in its [[characteristic]] to change it)",
                shorten(name),
                plain(lo),
                plain(hi),
                crate::config::PLAUSIBLE_WIDTHS
            )),
            _ => Ok(value),
        }
    }

    fn reject_row<S: OutcomeSink>(
        &self,
        sink: &mut S,
        line: u64,
        column: Option<usize>,
        reason: String,
        raw: &[u8],
    ) {
        let raw = raw_text(raw);
        match &self.plan.kind {
            PlanKind::Long { .. } => sink.rejected(Rejection {
                line,
                column: column.map(|c| self.plan.columns[c].clone()),
                reason,
                raw,
                measurements: 1,
            }),
            // One rejection for every measurement of the row; the column is where the problem
            // is when it is in one, otherwise none (every characteristic column).
            PlanKind::Wide { cells } if !cells.is_empty() => sink.rejected(Rejection {
                line,
                column: column.map(|c| self.plan.columns[c].clone()),
                reason,
                raw,
                measurements: cells.len() as u64,
            }),
            PlanKind::Wide { .. } => {}
        }
    }

    /// The index (in `PlantCalendar::shifts`) of the shift `ts` falls in.
    fn shift_index(&mut self, ts: DateTime<Utc>) -> usize {
        if let Some(table) = &self.shift_cache {
            if let Some(idx) = table.find(ts) {
                return idx;
            }
        }
        let day = self.calendar.production_day(ts);
        let table = self.calendar.shift_table(day);
        let idx = table.find(ts).unwrap_or(0);
        self.shift_cache = Some(table);
        idx
    }

    fn process_line<S: OutcomeSink>(
        &mut self,
        line_no: u64,
        read: &LineRead,
        line: &[u8],
        sink: &mut S,
    ) {
        if let LineRead::TooLong { len } = read {
            self.reject_row(
                sink,
                line_no,
                None,
                format!("line is {len} bytes long, more than the {MAX_LINE_BYTES} read"),
                line,
            );
            return;
        }
        if line.iter().all(|b| matches!(b, b' ' | b'\t')) {
            self.blank_rows += 1;
            self.reject_row(sink, line_no, None, "blank line".to_string(), line);
            return;
        }
        let mut fields = std::mem::take(&mut self.fields);
        let mut buf = std::mem::take(&mut self.field_buf);
        let result = split_fields(line, self.plan.layout.delimiter, &mut buf, &mut fields);
        match result {
            Err(reason) => self.reject_row(sink, line_no, None, reason, line),
            Ok(()) if fields.len() != self.plan.columns.len() => self.reject_row(
                sink,
                line_no,
                None,
                format!(
                    "row has {} fields, the header has {}",
                    fields.len(),
                    self.plan.columns.len()
                ),
                line,
            ),
            Ok(()) => self.process_fields(line_no, line, &buf, &fields, sink),
        }
        self.fields = fields;
        self.field_buf = buf;
    }

    fn process_fields<S: OutcomeSink>(
        &mut self,
        line_no: u64,
        line: &[u8],
        buf: &[u8],
        ends: &[usize],
        sink: &mut S,
    ) {
        let text = |i: usize| cell_text(buf, ends, i);
        // Timestamp.
        let ts = match text(self.plan.timestamp)
            .and_then(|t| self.ts_parser.parse(t))
            .and_then(check_year)
        {
            Ok(ts) => ts,
            Err(reason) => {
                let col = self.plan.timestamp;
                self.reject_row(sink, line_no, Some(col), reason, line);
                return;
            }
        };
        let shift = if self.has_shift {
            self.shift_index(ts)
        } else {
            0
        };
        let this = &*self;
        // Levels normalised to upper or lower case are owned for the row.
        let mut normalised: Vec<String> = Vec::new();
        if this.level_case.iter().any(|c| *c != LevelCase::Keep) {
            for (f, factor) in this.plan.factors.iter().enumerate() {
                let case = this.level_case.get(f).copied().unwrap_or_default();
                normalised.push(match (factor, case) {
                    (FactorCell::Column(i), LevelCase::Upper) => {
                        text(*i).map(str::to_uppercase).unwrap_or_default()
                    }
                    (FactorCell::Column(i), LevelCase::Lower) => {
                        text(*i).map(str::to_lowercase).unwrap_or_default()
                    }
                    _ => String::new(),
                });
            }
        }
        // Factor levels, borrowed from the line (or the calendar, for the derived shift).
        let n_factors = this.plan.factors.len();
        let mut inline = [""; INLINE_LEVELS];
        let mut spilled = Vec::new();
        let levels: &mut [&str] = if n_factors <= INLINE_LEVELS {
            &mut inline[..n_factors]
        } else {
            spilled.resize(n_factors, "");
            &mut spilled[..]
        };
        for (f, factor) in this.plan.factors.iter().enumerate() {
            match *factor {
                FactorCell::Shift => levels[f] = &this.calendar.shifts()[shift].name,
                FactorCell::Column(i) => match text(i) {
                    Ok("") => {
                        let reason = "empty cell (every factor needs a level)".to_string();
                        this.reject_row(sink, line_no, Some(i), reason, line);
                        return;
                    }
                    Ok(t) if t.chars().any(char::is_control) => {
                        let reason = format!(
                            "the level \"{}\" holds a control character (it would print like another level and break charts); remove it from the export",
                            t.escape_default()
                        );
                        this.reject_row(sink, line_no, Some(i), reason, line);
                        return;
                    }
                    Ok(t) => {
                        levels[f] = match this.level_case.get(f) {
                            Some(LevelCase::Upper | LevelCase::Lower) => normalised[f].as_str(),
                            _ => t,
                        }
                    }
                    Err(reason) => {
                        this.reject_row(sink, line_no, Some(i), reason, line);
                        return;
                    }
                },
            }
        }
        let levels: &[&str] = levels;
        // The part id: required when it identifies the measurement.
        let part = match this.plan.part {
            None => None,
            Some(i) => match text(i) {
                Ok("") if this.plan.layout.identity.part => {
                    let reason =
                        "empty cell (the part id identifies the measurement in this layout)"
                            .to_string();
                    this.reject_row(sink, line_no, Some(i), reason, line);
                    return;
                }
                Ok("") => None,
                Ok(t) if t.chars().any(char::is_control) => {
                    let reason = format!(
                        "the part id \"{}\" holds a control character; remove it from the export",
                        t.escape_default()
                    );
                    this.reject_row(sink, line_no, Some(i), reason, line);
                    return;
                }
                Ok(t) => Some(t),
                Err(reason) => {
                    this.reject_row(sink, line_no, Some(i), reason, line);
                    return;
                }
            },
        };
        // The subgroup id (owned for the row: joined cells or a derived window).
        let subgroup_text: Option<String> = match &this.plan.subgroup {
            None => None,
            Some(PlanSubgroup::Columns(columns)) => {
                let mut id = String::new();
                let mut any = false;
                for (k, &i) in columns.iter().enumerate() {
                    match text(i) {
                        Ok(t) if t.chars().any(char::is_control) => {
                            let reason = format!(
                                "the subgroup id \"{}\" holds a control character; remove it from the export",
                                t.escape_default()
                            );
                            this.reject_row(sink, line_no, Some(i), reason, line);
                            return;
                        }
                        Ok(t) => {
                            if k > 0 {
                                id.push('/');
                            }
                            id.push_str(t);
                            any |= !t.is_empty();
                        }
                        Err(reason) => {
                            this.reject_row(sink, line_no, Some(i), reason, line);
                            return;
                        }
                    }
                }
                any.then_some(id)
            }
            Some(PlanSubgroup::Window { window_ms, by }) => {
                let start_ms = ts.timestamp_millis().div_euclid(*window_ms) * window_ms;
                let start = DateTime::<Utc>::from_timestamp_millis(start_ms).unwrap_or(ts);
                let mut id = String::new();
                for &f in by {
                    id.push_str(levels[f]);
                    id.push('/');
                }
                id.push_str(&start.format("%Y-%m-%dT%H:%M:%SZ").to_string());
                Some(id)
            }
        };
        let subgroup = subgroup_text.as_deref();
        match &this.plan.kind {
            PlanKind::Long {
                characteristic,
                value,
            } => {
                let (characteristic, value) = (*characteristic, *value);
                let checked;
                // A station's code (CH07) mapped to its configured name.
                let cell = text(characteristic).map(|t| {
                    this.plan
                        .layout
                        .codes
                        .iter()
                        .find(|(code, _)| code == t)
                        .map_or(t, |(_, name)| name.as_str())
                });
                let outcome = match cell {
                    Err(r) => Err((characteristic, r)),
                    Ok("") => Err((characteristic, "empty cell (no characteristic name)".to_string())),
                    Ok(name) if !this.known.contains(name) && !this.add_new => Err((
                        characteristic,
                        format!(
                            "unknown characteristic \"{}\" (add it to the configuration or import with --add-new)",
                            shorten(name)
                        ),
                    )),
                    Ok(name) => {
                        // Configured names were checked with the configuration; new ones here.
                        let name = if this.known.contains(name) {
                            Ok(name)
                        } else {
                            match check_name(name) {
                                Ok(n) => {
                                    checked = n;
                                    Ok(checked.as_str())
                                }
                                Err(r) => Err(r),
                            }
                        };
                        match name {
                            Err(r) => Err((characteristic, format!("characteristic name: {r}"))),
                            Ok(name) => match text(value)
                                .and_then(|t| this.parse_cell_value(t))
                                .and_then(|v| this.check_plausible(name, v))
                            {
                                Ok(v) => Ok((name, v)),
                                Err(r) => Err((value, r)),
                            },
                        }
                    }
                };
                match outcome {
                    Ok((name, value)) => sink.accepted(MeasurementRef {
                        line: line_no,
                        characteristic: name,
                        ts,
                        value,
                        levels,
                        part,
                        subgroup,
                    }),
                    Err((col, reason)) => sink.rejected(Rejection {
                        line: line_no,
                        column: Some(this.plan.columns[col].clone()),
                        reason,
                        raw: raw_text(line),
                        measurements: 1,
                    }),
                }
            }
            PlanKind::Wide { cells } => {
                for (i, name, known) in cells {
                    let outcome = if !known && !this.add_new {
                        Err(format!(
                            "unknown characteristic \"{}\" (add it to the configuration or import with --add-new)",
                            shorten(name)
                        ))
                    } else if !known {
                        check_name(name)
                            .map_err(|r| format!("characteristic name: {r}"))
                            .and_then(|_| text(*i).and_then(|t| this.parse_cell_value(t)))
                    } else {
                        text(*i)
                            .and_then(|t| this.parse_cell_value(t))
                            .and_then(|v| this.check_plausible(name, v))
                    };
                    match outcome {
                        Ok(value) => sink.accepted(MeasurementRef {
                            line: line_no,
                            characteristic: name,
                            ts,
                            value,
                            levels,
                            part,
                            subgroup,
                        }),
                        Err(reason) => sink.rejected(Rejection {
                            line: line_no,
                            column: Some(this.plan.columns[*i].clone()),
                            reason,
                            raw: raw_text(cell(buf, ends, *i)),
                            measurements: 1,
                        }),
                    }
                }
            }
        }
    }
}

impl<R: Read> Iterator for ImportStream<R> {
    type Item = RowOutcome;

    fn next(&mut self) -> Option<RowOutcome> {
        loop {
            if let Some(outcome) = self.pending.pop_front() {
                let n = match &outcome {
                    RowOutcome::Accepted(_) => {
                        self.counts.accepted += 1;
                        1
                    }
                    RowOutcome::Rejected(r) => {
                        self.counts.rejected += r.measurements;
                        r.measurements
                    }
                };
                self.counts.measurements_read += n;
                return Some(outcome);
            }
            if self.is_done {
                return None;
            }
            // Read one line into the queue; counted above as each outcome is returned.
            let mut queue = Queue(&mut self.pending);
            let mut uncounted = Counts::default();
            let mut sink = Counting {
                sink: &mut queue,
                counts: &mut uncounted,
            };
            let more = read_row(
                &self.path,
                &mut self.lines,
                &mut self.rows,
                &mut self.sha256,
                &mut self.error,
                &mut sink,
            );
            self.counts.rows_read += uncounted.rows_read;
            if !more {
                self.is_done = true;
            }
        }
    }
}

/// Timestamps outside the years 1900 to 2200 are taken for typing or clock errors (and keep
/// the calendar arithmetic far from the ends of the representable range).
fn check_year(ts: DateTime<Utc>) -> std::result::Result<DateTime<Utc>, String> {
    use chrono::Datelike;
    if (1900..=2200).contains(&ts.year()) {
        Ok(ts)
    } else {
        Err(year_refused(ts.year()))
    }
}

/// The reason a timestamp of the year `year` is refused (outside 1900 to 2200).
pub(crate) fn year_refused(year: i32) -> String {
    format!(
        "timestamp year {year} is outside 1900 to 2200 (check the gauge clock or the timestamp_format)"
    )
}

/// A cell's text to an exact decimal, or the reason it is not a value.
pub fn parse_value(text: &str) -> std::result::Result<Decimal, String> {
    let t = text.trim();
    if t.is_empty() {
        return Err("empty cell (no value)".to_string());
    }
    if t.bytes()
        .all(|b| matches!(b, b'-' | b'+' | b'.' | b'/' | b'?' | b'*'))
    {
        return Err(format!(
            "\"{}\" is a placeholder, not a value (leave missing measurements out of the export)",
            shorten(t)
        ));
    }
    let value = Decimal::parse(t).map_err(|e| {
        let mut message = e.to_string();
        if message.chars().count() > 200 {
            message = format!("value \"{}\" {}", shorten(t), e.reason);
        }
        message
    })?;
    if value.to_f64().abs() >= NO_VALUE_CODE {
        return Err(format!(
            "value \"{}\" is an instrument's no-value code (magnitudes from 9.9E+37 up mean \"no reading\"), not a measurement",
            shorten(t)
        ));
    }
    Ok(value)
}

/// The field delimiter of a header line for `delimiter = "auto"`: of `,` `;` tab `|` (the comma
/// left out with a decimal comma), the one that splits the line (quotes respected) into the most
/// fields; ties go to the earlier in that list, and a line no candidate splits keeps the first.
pub fn sniff_delimiter(header: &[u8], decimal_comma: bool) -> u8 {
    let candidates: &[u8] = if decimal_comma { b";\t|" } else { b",;\t|" };
    let mut best = (candidates[0], 0usize);
    let (mut buf, mut fields) = (Vec::new(), Vec::new());
    for &d in candidates {
        if split_fields(header, d, &mut buf, &mut fields).is_ok() && fields.len() > best.1 {
            best = (d, fields.len());
        }
    }
    best.0
}

/// A value written with a decimal comma (`10,0123`, `-0,5`) as the exact decimal; a point in it
/// (a thousands separator, `1.234,5`) is refused, since the digits' grouping cannot be checked.
pub fn parse_value_decimal_comma(text: &str) -> std::result::Result<Decimal, String> {
    let t = text.trim();
    if t.contains('.') {
        return Err(format!(
            "value \"{}\" has a point in a decimal-comma layout: thousands separators are not accepted (write 1234,5, not 1.234,5)",
            shorten(t)
        ));
    }
    if t.matches(',').count() > 1 {
        return Err(format!(
            "value \"{}\" has more than one decimal comma",
            shorten(t)
        ));
    }
    parse_value(&t.replacen(',', ".", 1)).map_err(|r| r.replace(&t.replacen(',', ".", 1), t))
}

/// `x` to 12 significant digits without trailing zeros (7.9, not 7.9000000000000004).
fn plain(x: f64) -> String {
    let text = format!("{:.*e}", 11, x);
    text.parse::<f64>().map_or(text, |v| v.to_string())
}

/// Values of this magnitude and above are instruments' codes for "no reading" (9.9E+37 and
/// 9.91E+37 are the usual ones; common practice, no published source), never measurements.
pub const NO_VALUE_CODE: f64 = 9.9e37;

/// What [`LineReader::next_line`] found.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum LineRead {
    /// A whole line is in `LineReader::line` (without its line end).
    Line,
    /// The line was longer than [`MAX_LINE_BYTES`]; `line` holds its first bytes.
    TooLong { len: usize },
}

/// Physical lines of a byte stream, hashing every byte it consumes.
struct LineReader<R: Read> {
    inner: BufReader<R>,
    hasher: Sha256,
    line: Vec<u8>,
    line_no: u64,
}

impl<R: Read> LineReader<R> {
    fn new(reader: R) -> Self {
        LineReader {
            inner: BufReader::with_capacity(1 << 16, reader),
            hasher: Sha256::new(),
            line: Vec::new(),
            line_no: 0,
        }
    }

    fn next_line(&mut self) -> std::io::Result<Option<LineRead>> {
        self.line.clear();
        let mut len = 0usize;
        let mut saw_any = false;
        loop {
            let chunk = match self.inner.fill_buf() {
                Ok(c) => c,
                Err(e) if e.kind() == std::io::ErrorKind::Interrupted => continue,
                Err(e) => return Err(e),
            };
            if chunk.is_empty() {
                if !saw_any {
                    return Ok(None);
                }
                break;
            }
            saw_any = true;
            let (take, consumed, is_end) = match chunk.iter().position(|&b| b == b'\n') {
                Some(i) => (i, i + 1, true),
                None => (chunk.len(), chunk.len(), false),
            };
            len += take;
            let room = MAX_LINE_BYTES.saturating_sub(self.line.len());
            self.line.extend_from_slice(&chunk[..take.min(room)]);
            self.hasher.update(&chunk[..consumed]);
            self.inner.consume(consumed);
            if is_end {
                break;
            }
        }
        self.line_no += 1;
        if len > MAX_LINE_BYTES {
            return Ok(Some(LineRead::TooLong { len }));
        }
        if self.line.last() == Some(&b'\r') {
            self.line.pop();
        }
        Ok(Some(LineRead::Line))
    }
}

/// One line of a CSV file read by [`Records`]: its 1-based physical line number and its fields
/// (trimmed), or why it could not be split.
pub type Record = (u64, std::result::Result<Vec<String>, String>);

/// The CSV lines of a reader, split by the same rules as an import (physical line numbers, CRLF,
/// RFC 4180 quoting within a line and no quoted line breaks, the byte-order mark dropped from
/// the first line), for readers of plain CSV files outside the plant layouts (`compare`).
/// Blank lines are skipped; their numbers still count.
pub struct Records<R: Read> {
    lines: LineReader<R>,
    delimiter: u8,
    buf: Vec<u8>,
    ends: Vec<usize>,
}

impl<R: Read> Records<R> {
    /// Records of `reader` separated by `delimiter`.
    pub fn new(reader: R, delimiter: u8) -> Self {
        Records {
            lines: LineReader::new(reader),
            delimiter,
            buf: Vec::new(),
            ends: Vec::new(),
        }
    }
}

impl<R: Read> Iterator for Records<R> {
    type Item = std::io::Result<Record>;

    fn next(&mut self) -> Option<Self::Item> {
        loop {
            let read = match self.lines.next_line() {
                Ok(Some(r)) => r,
                Ok(None) => return None,
                Err(e) => return Some(Err(e)),
            };
            let n = self.lines.line_no;
            if let LineRead::TooLong { len } = read {
                return Some(Ok((
                    n,
                    Err(format!(
                        "line is {len} bytes long, more than the {MAX_LINE_BYTES} read"
                    )),
                )));
            }
            let mut line: &[u8] = &self.lines.line;
            if n == 1 {
                line = line.strip_prefix(&[0xEF, 0xBB, 0xBF]).unwrap_or(line);
            }
            if line.iter().all(|b| matches!(b, b' ' | b'\t')) {
                continue;
            }
            let fields = split_fields(line, self.delimiter, &mut self.buf, &mut self.ends)
                .and_then(|()| {
                    field_slices(&self.buf, &self.ends)
                        .enumerate()
                        .map(|(i, f)| {
                            std::str::from_utf8(f)
                                .map(|t| t.trim().to_string())
                                .map_err(|_| {
                                    format!(
                                        "field {} is not valid UTF-8 (save the file as UTF-8)",
                                        i + 1
                                    )
                                })
                        })
                        .collect()
                });
            return Some(Ok((n, fields)));
        }
    }
}

/// Splits one line into fields (RFC 4180 quoting within the line). The unquoted contents go to
/// `buf`, and `ends[i]` is where field `i` ends in `buf`.
fn split_fields(
    line: &[u8],
    delimiter: u8,
    buf: &mut Vec<u8>,
    ends: &mut Vec<usize>,
) -> std::result::Result<(), String> {
    buf.clear();
    ends.clear();
    let mut i = 0;
    loop {
        // Spaces before an opening quote are allowed.
        let mut j = i;
        while j < line.len() && line[j] == b' ' {
            j += 1;
        }
        if j < line.len() && line[j] == b'"' {
            i = j + 1;
            loop {
                if i >= line.len() {
                    return Err(format!(
                        "quoted field {} is not closed on this line",
                        ends.len() + 1
                    ));
                }
                if line[i] == b'"' {
                    if line.get(i + 1) == Some(&b'"') {
                        buf.push(b'"');
                        i += 2;
                    } else {
                        i += 1;
                        break;
                    }
                } else {
                    buf.push(line[i]);
                    i += 1;
                }
            }
            while i < line.len() && line[i] == b' ' {
                i += 1;
            }
            if i < line.len() && line[i] != delimiter {
                return Err(format!(
                    "text after the closing quote of field {}",
                    ends.len() + 1
                ));
            }
        } else {
            let rest = &line[i..];
            let n = rest
                .iter()
                .position(|&b| b == delimiter)
                .unwrap_or(rest.len());
            buf.extend_from_slice(&rest[..n]);
            i += n;
        }
        ends.push(buf.len());
        if i >= line.len() {
            return Ok(());
        }
        i += 1; // the delimiter
    }
}

fn field_slices<'a>(buf: &'a [u8], ends: &'a [usize]) -> impl Iterator<Item = &'a [u8]> + 'a {
    ends.iter().enumerate().map(move |(i, &end)| {
        let start = if i == 0 { 0 } else { ends[i - 1] };
        &buf[start..end]
    })
}

/// `bytes` without leading and trailing spaces and tabs.
fn trim_bytes(bytes: &[u8]) -> &[u8] {
    let start = bytes
        .iter()
        .position(|b| !matches!(b, b' ' | b'\t'))
        .unwrap_or(bytes.len());
    let end = bytes
        .iter()
        .rposition(|b| !matches!(b, b' ' | b'\t'))
        .map_or(start, |i| i + 1);
    &bytes[start..end]
}

fn raw_text(bytes: &[u8]) -> String {
    let text = String::from_utf8_lossy(bytes);
    if text.chars().count() <= MAX_RAW_CHARS {
        text.into_owned()
    } else {
        let head: String = text.chars().take(MAX_RAW_CHARS).collect();
        format!("{head}... (cut, {} bytes in all)", bytes.len())
    }
}

fn hex(bytes: &[u8]) -> String {
    use std::fmt::Write as _;
    let mut s = String::with_capacity(bytes.len() * 2);
    for b in bytes {
        let _ = write!(s, "{b:02x}");
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn split_fields_quoting() {
        let mut buf = Vec::new();
        let mut ends = Vec::new();
        let fields = |line: &str,
                      buf: &mut Vec<u8>,
                      ends: &mut Vec<usize>|
         -> std::result::Result<Vec<String>, String> {
            split_fields(line.as_bytes(), b',', buf, ends)?;
            Ok(field_slices(buf, ends)
                .map(|f| String::from_utf8(f.to_vec()).unwrap())
                .collect())
        };
        assert_eq!(
            fields("a,b,,c", &mut buf, &mut ends).unwrap(),
            ["a", "b", "", "c"]
        );
        assert_eq!(
            fields("\"a,b\",\"say \"\"hi\"\"\",x", &mut buf, &mut ends).unwrap(),
            ["a,b", "say \"hi\"", "x"]
        );
        assert_eq!(fields("a,", &mut buf, &mut ends).unwrap(), ["a", ""]);
        assert_eq!(fields("", &mut buf, &mut ends).unwrap(), [""]);
        assert!(fields("\"open,b", &mut buf, &mut ends)
            .unwrap_err()
            .contains("not closed"));
        assert!(fields("\"a\"b,c", &mut buf, &mut ends)
            .unwrap_err()
            .contains("after the closing quote"));
    }

    #[test]
    fn value_reasons() {
        assert_eq!(parse_value("-12.5").unwrap().to_string(), "-12.5");
        assert_eq!(
            parse_value("1000000000000.4").unwrap().to_string(),
            "1000000000000.4"
        );
        assert!(parse_value("1,5")
            .unwrap_err()
            .contains("use '.' as the decimal separator"));
        assert!(parse_value("-").unwrap_err().contains("placeholder"));
        assert!(parse_value("NaN").unwrap_err().contains("NaN"));
        assert!(parse_value("1e400").unwrap_err().contains("out of range"));
        assert!(parse_value("12.5 mm").unwrap_err().contains("no units"));
        assert!(parse_value("").unwrap_err().contains("empty"));
    }

    #[test]
    fn line_reader_counts_lines_and_hashes_everything() {
        let data = b"h\r\n\r\nx\n\ny";
        let mut r = LineReader::new(&data[..]);
        let mut lines = Vec::new();
        while let Some(LineRead::Line) = r.next_line().unwrap() {
            lines.push(String::from_utf8(r.line.clone()).unwrap());
        }
        assert_eq!(lines, ["h", "", "x", "", "y"]);
        // SHA-256 of the same bytes computed directly (sha2 crate, FIPS 180-4).
        assert_eq!(hex(&r.hasher.finalize()), hex(&Sha256::digest(data)));
    }

    #[test]
    fn sha256_of_abc() {
        // FIPS 180-2, appendix B.1: SHA-256("abc").
        assert_eq!(
            hex(&Sha256::digest(b"abc")),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
    }
}
