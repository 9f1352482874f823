//! `samewise compare FILE.csv --by COLUMN --measure COLUMN`: the one-way analysis of one CSV file,
//! without a database.
//!
//! Reads any CSV with a header row through the import's reader ([`crate::ingest::Records`]:
//! quoted fields within a line, commas and non-ASCII text in labels, UTF-8 with or without a
//! byte-order mark, CRLF or LF line ends, blank lines skipped, errors naming the physical line),
//! with `--delimiter` (or `auto`) and `--decimal-comma`; header names match ignoring case. Measure
//! cells are parsed as exact decimals
//! and centred on one exact origin (the median of the first 31 values) before any arithmetic, so gauge readings such
//! as `1000000000000.4` keep their digits. Rows are grouped by the label column in first-seen
//! order and handed to [`crate::stats::oneway::analyze`].
//!
//! Bad input stops the command with an error naming the file, line and column: a missing column, a
//! ragged row, a file that is not UTF-8, an empty label, or a measure cell that is empty or not a
//! number (no row is silently dropped). The JSON field names are documented in docs/json.md.

use std::collections::HashMap;
use std::io::Write;
use std::path::{Path, PathBuf};

use crate::outputs::compare::{
    BlockedTestOut, CompareDocument, CompareInput, DesignOut, NestedComponentsOut, NestedTestOut,
    SerialOut,
};
use crate::results::PairResult;

use crate::stats::decimal::Decimal;
use crate::stats::oneway::{analyze, LeadingMethod, OneWay, OneWayOptions, Tolerance};
use crate::stats::{Stat, TestResult};
use crate::{Error, Result};

/// Flags of `samewise compare`.
#[derive(Debug, clap::Args)]
pub struct CompareArgs {
    /// CSV file with a header row.
    pub file: PathBuf,
    /// Column whose values name the groups (machine, line, supplier, ...).
    #[arg(long, value_name = "COLUMN")]
    pub by: String,
    /// Column holding the measured values (`--characteristic COLUMN` is accepted too, the
    /// name the plant commands use).
    #[arg(long, value_name = "COLUMN", visible_alias = "characteristic")]
    pub measure: String,
    /// Lower specification limit, in measurement units.
    #[arg(long, value_name = "X", allow_hyphen_values = true)]
    pub lsl: Option<String>,
    /// Upper specification limit, in measurement units.
    #[arg(long, value_name = "Y", allow_hyphen_values = true)]
    pub usl: Option<String>,
    /// Target (nominal) value, in measurement units.
    #[arg(long, value_name = "T", allow_hyphen_values = true)]
    pub target: Option<String>,
    /// A difference between two group means that matters, for the sensitivity analysis.
    #[arg(long, value_name = "D")]
    pub detect: Option<f64>,
    /// Print one JSON object instead of the readable report.
    #[arg(long)]
    pub json: bool,
    /// Field delimiter: one character (`;`, `|`, `\t` for a tab) or `auto` (sniffed from the
    /// header line, as a layout's `delimiter = "auto"`); default `,`.
    #[arg(long, value_name = "CHAR")]
    pub delimiter: Option<String>,
    /// Values are written with a decimal comma (`10,0123`); the delimiter must then not be `,`
    /// (default then `;`).
    #[arg(long)]
    pub decimal_comma: bool,
    /// Column naming the measurements taken together (shot, sample, batch): parts of one
    /// subgroup share its deviation. A `--by` factor constant within every subgroup is tested on
    /// the subgroup means (nested); one that varies within the subgroups with the subgroups as
    /// blocks. Without it, the values are checked for serial dependence in file order.
    #[arg(long, value_name = "COLUMN")]
    pub subgroup: Option<String>,
}

/// How a compared file is written: its field delimiter and decimal separator.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct CsvFormat {
    /// The field delimiter; `None`: sniffed from the header line.
    pub delimiter: Option<u8>,
    /// Values with a decimal comma.
    pub decimal_comma: bool,
}

impl Default for CsvFormat {
    fn default() -> Self {
        CsvFormat {
            delimiter: Some(b','),
            decimal_comma: false,
        }
    }
}

impl CsvFormat {
    /// The format the flags name.
    pub fn from_flags(delimiter: Option<&str>, decimal_comma: bool) -> Result<CsvFormat> {
        let delimiter = match delimiter {
            None if decimal_comma => Some(b';'),
            None => Some(b','),
            Some("auto") => None,
            Some("\\t") | Some("tab") => Some(b'\t'),
            Some(d) if d.len() == 1 && d.is_ascii() && !matches!(d, "\"" | "\n" | "\r") => {
                Some(d.as_bytes()[0])
            }
            Some(d) => {
                return Err(Error::Usage(format!(
                    "--delimiter {d}: give one character (e.g. ';', '|', '\\t') or auto"
                )))
            }
        };
        if decimal_comma && delimiter == Some(b',') {
            return Err(Error::Usage(
                "--decimal-comma with --delimiter ,: a value like 10,5 could not be told from two fields; use --delimiter ';'"
                    .to_string(),
            ));
        }
        Ok(CsvFormat {
            delimiter,
            decimal_comma,
        })
    }
}

/// Measurements of one CSV file, grouped, as offsets from one exact origin.
#[derive(Debug, Clone)]
pub struct GroupedData {
    /// Group labels in first-seen order.
    pub names: Vec<String>,
    /// Offsets `value - origin` per group.
    pub values: Vec<Vec<f64>>,
    /// The exact origin (the median of the first 31 measured values, so one wild value cannot
    /// fix it).
    pub origin: Decimal,
    /// Largest number of decimal places seen in the measure column (for display).
    pub max_places: i32,
    /// Number of data rows read.
    pub n_rows: u64,
    /// With a subgroup column: per group, the subgroup number of each value (parallel to
    /// `values`; subgroups numbered in first-seen order). Empty without one.
    pub subgroups: Vec<Vec<u32>>,
}

fn ingest_error(path: &Path, line: Option<u64>, column: Option<&str>, reason: String) -> Error {
    Error::Ingest {
        path: path.to_path_buf(),
        line,
        column: column.map(str::to_string),
        reason,
    }
}

/// Reads and groups a CSV file (see the module docs for what is accepted and rejected).
pub fn read_grouped(
    path: &Path,
    by: &str,
    measure: &str,
    subgroup: Option<&str>,
    format: CsvFormat,
) -> Result<GroupedData> {
    let bytes = std::fs::read(path).map_err(|e| Error::io(path, e))?;
    parse_grouped_with(path, &bytes, by, measure, subgroup, format)
}

/// Groups CSV bytes; `path` only names the input in errors.
pub fn parse_grouped(
    path: &Path,
    bytes: &[u8],
    by: &str,
    measure: &str,
    format: CsvFormat,
) -> Result<GroupedData> {
    parse_grouped_with(path, bytes, by, measure, None, format)
}

/// [`parse_grouped`] with the subgroup column `subgroup` read too.
pub fn parse_grouped_with(
    path: &Path,
    bytes: &[u8],
    by: &str,
    measure: &str,
    subgroup: Option<&str>,
    format: CsvFormat,
) -> Result<GroupedData> {
    let body = bytes.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(bytes);
    let delimiter = format.delimiter.unwrap_or_else(|| {
        let header = body.split(|&b| b == b'\n').next().unwrap_or_default();
        let header = header.strip_suffix(b"\r").unwrap_or(header);
        crate::ingest::sniff_delimiter(header, format.decimal_comma)
    });
    if body.iter().all(|b| b.is_ascii_whitespace()) {
        return Err(ingest_error(
            path,
            None,
            None,
            "the file is empty (a header row naming the columns is required)".into(),
        ));
    }
    // The import's own reader: physical line numbers, CRLF, quoting within a line only.
    let mut records = crate::ingest::Records::new(body, delimiter);
    let next = |records: &mut crate::ingest::Records<&[u8]>| -> Result<Option<(u64, Vec<String>)>> {
        match records.next() {
            None => Ok(None),
            Some(Err(e)) => Err(Error::io(path, e)),
            Some(Ok((line, Err(reason)))) => Err(ingest_error(path, Some(line), None, reason)),
            Some(Ok((line, Ok(fields)))) => Ok(Some((line, fields))),
        }
    };
    let Some((header_line, header)) = next(&mut records)? else {
        return Err(ingest_error(
            path,
            None,
            None,
            "the file has no header row".into(),
        ));
    };
    let find = |name: &str| -> Result<usize> {
        let hits: Vec<usize> = header
            .iter()
            .enumerate()
            // Matched as the import matches layout columns: trimmed, ignoring ASCII case.
            .filter(|(_, h)| h.eq_ignore_ascii_case(name.trim()))
            .map(|(i, _)| i)
            .collect();
        match hits.as_slice() {
            [one] => Ok(*one),
            [] => Err(ingest_error(
                path,
                Some(header_line),
                None,
                format!(
                    "column \"{name}\" not found{}; the header has: {}",
                    crate::names::did_you_mean(name.trim(), header.iter().map(|h| h.as_str())),
                    header
                        .iter()
                        .map(|h| format!("\"{h}\""))
                        .collect::<Vec<_>>()
                        .join(", ")
                ),
            )),
            _ => Err(ingest_error(
                path,
                Some(header_line),
                None,
                format!("column \"{name}\" appears more than once in the header"),
            )),
        }
    };
    let by_idx = find(by)?;
    let measure_idx = find(measure)?;
    if by_idx == measure_idx {
        return Err(Error::Usage(
            "--by and --measure name the same column".to_string(),
        ));
    }
    let subgroup_idx = match subgroup {
        None => None,
        Some(name) => {
            let i = find(name)?;
            if i == by_idx || i == measure_idx {
                return Err(Error::Usage(
                    "--subgroup names the same column as --by or --measure".to_string(),
                ));
            }
            Some(i)
        }
    };
    let mut subgroup_ids: HashMap<String, u32> = HashMap::new();
    let mut subgroups: Vec<Vec<u32>> = Vec::new();
    let width = header.len();
    let mut index: HashMap<String, usize> = HashMap::new();
    let mut names: Vec<String> = Vec::new();
    let mut values: Vec<Vec<f64>> = Vec::new();
    let mut origin: Option<Decimal> = None;
    // The first values wait (group, exact value) until their median fixes the origin, so one
    // wild first value cannot (the same rule as the import's, storage::import::ORIGIN_SAMPLE).
    let mut pending: Vec<(usize, Decimal)> = Vec::new();
    let fix_origin = |pending: &mut Vec<(usize, Decimal)>, values: &mut Vec<Vec<f64>>| {
        let mut sorted: Vec<Decimal> = pending.iter().map(|&(_, v)| v).collect();
        sorted.sort_by(|a, b| a.to_f64().total_cmp(&b.to_f64()));
        let o = sorted[sorted.len() / 2];
        for (group, value) in pending.drain(..) {
            values[group].push(value.offset_from(&o));
        }
        o
    };
    let mut max_places = 0i32;
    let mut n_rows = 0u64;
    while let Some((line, record)) = next(&mut records)? {
        n_rows += 1;
        if record.len() != width {
            return Err(ingest_error(
                path,
                Some(line),
                None,
                format!(
                    "row has {} fields but the header has {width} (ragged row)",
                    record.len()
                ),
            ));
        }
        let label = record[by_idx].as_str();
        let cell = record[measure_idx].as_str();
        if label.is_empty() {
            return Err(ingest_error(
                path,
                Some(line),
                Some(by),
                "group label is empty".into(),
            ));
        }
        if cell.trim().is_empty() {
            return Err(ingest_error(
                path,
                Some(line),
                Some(measure),
                "measure cell is empty (every row needs a value; remove the row or fill it in)"
                    .into(),
            ));
        }
        let value = if format.decimal_comma {
            crate::ingest::parse_value_decimal_comma(cell)
                .map_err(|r| ingest_error(path, Some(line), Some(measure), r))?
        } else {
            Decimal::parse(cell)
                .map_err(|e| ingest_error(path, Some(line), Some(measure), e.to_string()))?
        };
        max_places = max_places.max(value.normalized().scale());
        let group = match index.get(label) {
            Some(&g) => g,
            None => {
                index.insert(label.to_string(), names.len());
                names.push(label.to_string());
                values.push(Vec::new());
                if subgroup_idx.is_some() {
                    subgroups.push(Vec::new());
                }
                names.len() - 1
            }
        };
        if let Some(i) = subgroup_idx {
            let id = record[i].trim();
            if id.is_empty() {
                return Err(ingest_error(
                    path,
                    Some(line),
                    subgroup,
                    "subgroup cell is empty (every row needs its subgroup with --subgroup)".into(),
                ));
            }
            let next = subgroup_ids.len() as u32;
            let n = *subgroup_ids.entry(id.to_string()).or_insert(next);
            subgroups[group].push(n);
        }
        match origin {
            Some(o) => values[group].push(value.offset_from(&o)),
            None => {
                pending.push((group, value));
                if pending.len() >= 31 {
                    origin = Some(fix_origin(&mut pending, &mut values));
                }
            }
        }
    }
    if !pending.is_empty() {
        origin = Some(fix_origin(&mut pending, &mut values));
    }
    if n_rows == 0 {
        return Err(ingest_error(
            path,
            None,
            None,
            "the file has a header but no data rows".into(),
        ));
    }
    Ok(GroupedData {
        names,
        values,
        origin: origin.unwrap_or(Decimal::ZERO),
        max_places,
        n_rows,
        subgroups,
    })
}

fn parse_limit(flag: &str, text: &Option<String>, origin: &Decimal) -> Result<Option<f64>> {
    match text {
        None => Ok(None),
        Some(t) => {
            let d = Decimal::parse(t).map_err(|e| Error::Usage(format!("--{flag}: {e}")))?;
            Ok(Some(d.offset_from(origin)))
        }
    }
}

/// Runs `samewise compare`.
pub fn run(args: &CompareArgs) -> Result<std::process::ExitCode> {
    let format = CsvFormat::from_flags(args.delimiter.as_deref(), args.decimal_comma)?;
    let mut data = read_grouped(
        &args.file,
        &args.by,
        &args.measure,
        args.subgroup.as_deref(),
        format,
    )?;
    if data.names.len() < 2 {
        return Err(Error::NotEnoughData {
            characteristic: args.measure.clone(),
            reason: format!(
                "column \"{}\" has {} distinct value(s) in {}; comparing needs at least two groups",
                args.by,
                data.names.len(),
                args.file.display()
            ),
        });
    }
    let lsl = parse_limit("lsl", &args.lsl, &data.origin)?;
    let usl = parse_limit("usl", &args.usl, &data.origin)?;
    let target = parse_limit("target", &args.target, &data.origin)?;
    if let (Some(l), Some(u)) = (lsl, usl) {
        if l >= u {
            return Err(Error::Usage("--lsl must be smaller than --usl".to_string()));
        }
    }
    if let Some(d) = args.detect {
        if !(d.is_finite() && d > 0.0) {
            return Err(Error::Usage(
                "--detect must be a positive number".to_string(),
            ));
        }
    }
    let tolerance = (lsl.is_some() || usl.is_some() || target.is_some()).then_some(Tolerance {
        lsl,
        usl,
        target,
    });
    let options = OneWayOptions {
        detect: args.detect,
        tolerance,
        ..OneWayOptions::default()
    };
    let structure = sampling_structure(args, &mut data);
    let refs: Vec<&[f64]> = data.values.iter().map(Vec::as_slice).collect();
    let result = analyze(&refs, &options).map_err(|e| Error::NotEnoughData {
        characteristic: args.measure.clone(),
        reason: e.reason,
    })?;
    let mut out = std::io::stdout().lock();
    let written = if args.json {
        let doc = to_document(args, &data, &result, &options, structure.design);
        writeln!(out, "{}", super::format::document_json(&doc))
    } else {
        let text = render_text(args, &data, &result, &options);
        // The sampling structure goes right after the first (heading) line.
        let (head, rest) = text.split_once("\n\n").unwrap_or((&text, ""));
        out.write_all(format!("{head}\n\n{}\n{rest}", structure.text).as_bytes())
    };
    match written.and_then(|_| out.flush()) {
        Ok(()) => Ok(std::process::ExitCode::from(super::EXIT_OK)),
        // A closed stdout pipe counts as success.
        Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => {
            Ok(std::process::ExitCode::from(super::EXIT_OK))
        }
        Err(e) => Err(Error::io("<stdout>", e)),
    }
}

/// The sampling structure of a comparison: the text paragraph and the JSON `design` object.
struct Structure {
    text: String,
    design: DesignOut,
}

/// Decides the design from the subgroup column (see `analysis::design`) and, for a nested or
/// mixed design, replaces each group's values by its subgroup (cell) means; for a blocked design
/// by the values adjusted for the subgroups. Without a subgroup column, checks the values for
/// serial dependence in file order.
fn sampling_structure(args: &CompareArgs, data: &mut GroupedData) -> Structure {
    use crate::analysis::design::{arrange, DesignKind};
    let confidence = 0.95;
    if data.subgroups.is_empty() {
        let refs: Vec<&[f64]> = data.values.iter().map(Vec::as_slice).collect();
        return match crate::stats::serial::serial_dependence(&refs) {
            Ok(c) => {
                let alarm = c.p < 0.05;
                let text = format!(
                    "Sampling structure: every value a unit (no --subgroup). Serial dependence in file order within the groups: lag-1 serial correlation {:.3}, z = {:.2}, p = {}{}\n",
                    c.r1,
                    c.z,
                    pval(c.p),
                    if alarm {
                        format!(
                            "; neighbouring values are alike (design effect {:.1}), so the p-values below, which count every value as independent, are too small to trust: give the column of measurements taken together with --subgroup",
                            crate::stats::serial::design_effect(&refs)
                        )
                    } else {
                        "; no sign that neighbouring values are alike".into()
                    }
                );
                Structure {
                    text,
                    design: DesignOut {
                        serial_dependence: Some(SerialOut {
                            r1: c.r1,
                            z: c.z,
                            p: c.p,
                            fails: alarm,
                        }),
                        ..DesignOut::new("independent", None)
                    },
                }
            }
            Err(e) => Structure {
                text: format!("Sampling structure: every value a unit (no --subgroup); serial dependence: {}\n", e.reason),
                design: DesignOut {
                    serial_dependence_reason: Some(e.reason),
                    ..DesignOut::new("independent", None)
                },
            },
        };
    }
    let column = args.subgroup.clone().unwrap_or_default();
    // Flat arrays for the arrangement: value, group, subgroup.
    let mut values = Vec::new();
    let mut group = Vec::new();
    let mut subgroup = Vec::new();
    for (g, (v, sg)) in data.values.iter().zip(&data.subgroups).enumerate() {
        values.extend_from_slice(v);
        group.extend(std::iter::repeat_n(g as u32, v.len()));
        subgroup.extend_from_slice(sg);
    }
    let k = data.names.len();
    let Ok(a) = arrange(&values, &subgroup, |row| Some(group[row])) else {
        return Structure {
            text: "Sampling structure: no subgroups found\n".into(),
            design: DesignOut {
                n_subgroups_reason: Some("no subgroups found in the column".into()),
                serial_dependence_reason: Some(
                    "not checked: a subgroup column was given (but held no subgroups)".into(),
                ),
                ..DesignOut::new("independent", Some(column))
            },
        };
    };
    let mut design = DesignOut {
        n_subgroups: Some(a.n_subgroups as u64),
        ..DesignOut::new(a.kind.as_str(), Some(column.clone()))
    };
    let text = match a.kind {
        DesignKind::Nested | DesignKind::CellMeans | DesignKind::Independent => {
            let mut text = if a.kind == DesignKind::Nested {
                format!(
                    "Sampling structure: nested. \"{}\" is constant within each of the {} subgroups of \"{column}\", so the subgroup is the unit: the groups and tests below are on the subgroup means (ANOVA on subgroup means).\n",
                    args.by, a.n_subgroups
                )
            } else {
                format!(
                    "Sampling structure: mixed ({}). The groups and tests below are on the mean of each group within each subgroup.\n",
                    a.reason.as_deref().unwrap_or("neither nested nor crossed")
                )
            };
            if a.kind == DesignKind::Nested {
                match crate::stats::nested::nested_anova(&a.nested_groups(k), confidence) {
                    Ok(n) => {
                        if let Ok(t) = &n.levels_test {
                            text.push_str(&format!(
                                "Nested ANOVA: F = {} on {} and {} df, p = {} ({})\n",
                                sig(t.f, 6),
                                sig(t.df1, 4),
                                sig(t.df2, 4),
                                pval(t.p),
                                t.method.name()
                            ));
                            design.nested_test = Some(NestedTestOut {
                                f: t.f,
                                df1: t.df1,
                                df2: t.df2,
                                p: t.p,
                                method: t.method.name().to_string(),
                            });
                        }
                        if let Ok(c) = &n.components {
                            text.push_str(&format!(
                                "Variance components: between groups {} ({:.1}%), between subgroups within a group {} ({:.1}%), within subgroups {} ({:.1}%)\n",
                                sig(c.levels, 4),
                                100.0 * c.share_levels,
                                sig(c.subgroups, 4),
                                100.0 * c.share_subgroups,
                                sig(c.within, 4),
                                100.0 * c.share_within
                            ));
                            design.variance_components = Some(NestedComponentsOut {
                                between: c.levels,
                                subgroups: c.subgroups,
                                within: c.within,
                                share_between: c.share_levels,
                                share_subgroups: c.share_subgroups,
                                share_within: c.share_within,
                                method: c.method.to_string(),
                            });
                        }
                    }
                    Err(e) => {
                        text.push_str(&format!("Nested ANOVA: {}\n", e.reason));
                        design.nested_test_reason = Some(e.reason.clone());
                        design.variance_components_reason = Some(e.reason);
                    }
                }
            }
            data.values = a.cell_means(k);
            text
        }
        DesignKind::Blocked => {
            let (slots, blocks) = a.labels();
            match crate::stats::blocked::blocked_anova(
                &a.values,
                &slots,
                &blocks,
                k,
                a.n_subgroups,
                confidence,
            ) {
                Err(e) => {
                    design.blocked_test_reason = Some(e.reason.clone());
                    format!(
                        "Sampling structure: blocked, but {}; the values are tested as independent\n",
                        e.reason
                    )
                }
                Ok(fit) => {
                    let mut text = format!(
                        "Sampling structure: blocked. \"{}\" varies within the {} subgroups of \"{column}\", so each subgroup's deviation is taken out (additive two-way ANOVA, subgroups as blocks, Type II).\n",
                        args.by, a.n_subgroups
                    );
                    match &fit.levels_test {
                        Ok(t) => {
                            text.push_str(&format!(
                                "Blocked F (groups adjusted for the subgroups) = {} on {} and {} df, p = {}: this is the test of the groups; the one-way tables below describe the values adjusted for the subgroups.\n",
                                sig(t.statistic, 6),
                                t.df1.unwrap_or(f64::NAN),
                                t.df2.unwrap_or(f64::NAN),
                                pval(t.p)
                            ));
                            design.blocked_test = Some(BlockedTestOut {
                                test: t.into(),
                                ss_groups: fit.ss_levels,
                                ss_subgroups: fit.ss_blocks,
                                ss_residual: fit.ss_resid,
                            });
                        }
                        Err(e) => {
                            text.push_str(&format!("Blocked F: {}\n", e.reason));
                            design.blocked_test_reason = Some(e.reason.clone());
                        }
                    }
                    design.blocked_pairs = fit
                        .pairs
                        .iter()
                        .flatten()
                        .map(|p| PairResult::named(&data.names, &p.into()))
                        .collect();
                    // Each group's values adjusted for the subgroups: its least-squares mean
                    // plus the residuals (its raw mean where the design does not link it).
                    let mut adjusted = vec![Vec::new(); k];
                    for (i, &slot) in slots.iter().enumerate() {
                        adjusted[slot as usize].push(fit.residuals[i]);
                    }
                    for (slot, u) in adjusted.iter_mut().enumerate() {
                        let raw = &data.values[slot];
                        let centre = Some(fit.adjusted_means[slot])
                            .filter(|m| m.is_finite())
                            .unwrap_or_else(|| raw.iter().sum::<f64>() / raw.len() as f64);
                        for v in u.iter_mut() {
                            *v += centre;
                        }
                    }
                    data.values = adjusted;
                    text
                }
            }
        }
    };
    Structure { text, design }
}

// ---------------------------------------------------------------------------------------------
// JSON

/// The document of `compare --json` (field reference: docs/json.md).
pub fn to_document(
    args: &CompareArgs,
    data: &GroupedData,
    r: &OneWay,
    options: &OneWayOptions,
    design: DesignOut,
) -> CompareDocument {
    let input = CompareInput {
        file: args.file.display().to_string(),
        by: args.by.clone(),
        measure: args.measure.clone(),
        names: &data.names,
        origin: &data.origin,
        n_rows: data.n_rows,
        tolerance: options.tolerance,
        confidence: options.confidence,
    };
    CompareDocument::new(&input, r, design)
}

// ---------------------------------------------------------------------------------------------
// Text report

use super::format::{dfmt, pval, sig};

fn verdict(p: f64) -> &'static str {
    if p < 0.05 {
        "attention"
    } else {
        "pass"
    }
}

fn test_line(out: &mut String, name: &str, stat_name: &str, r: &Stat<TestResult>, judge: bool) {
    match r {
        Ok(t) => {
            let df = match (t.df1, t.df2) {
                (Some(a), Some(b)) => format!(" (df {}, {})", dfmt(a), dfmt(b)),
                (Some(a), None) => format!(" (df {})", dfmt(a)),
                _ => String::new(),
            };
            let mark = if judge {
                format!("  {}", verdict(t.p))
            } else {
                String::new()
            };
            out.push_str(&format!(
                "  {name:<32} {stat_name} = {}{df}, p = {}{mark}\n",
                sig(t.statistic, 6),
                pval(t.p)
            ));
        }
        Err(e) => out.push_str(&format!("  {name:<32} not available: {}\n", e.reason)),
    }
}

/// The readable report of `samewise compare`.
pub fn render_text(
    args: &CompareArgs,
    data: &GroupedData,
    r: &OneWay,
    options: &OneWayOptions,
) -> String {
    let origin = data.origin.to_f64();
    let places = (data.max_places + 2).clamp(0, 12) as usize;
    let val = |offset: f64| format!("{:.places$}", origin + offset);
    let mut o = String::new();
    o.push_str(&format!(
        "Comparing \"{}\" across \"{}\" in {}: {} measurements in {} groups\n\n",
        args.measure,
        args.by,
        args.file.display(),
        data.n_rows,
        data.names.len()
    ));
    let name_w = data
        .names
        .iter()
        .map(|n| n.chars().count())
        .max()
        .unwrap_or(5)
        .clamp(5, 30);
    o.push_str(&format!(
        "{:<name_w$}  {:>8}  {:>16}  {:>12}  {:>16}  {:>16}\n",
        "group", "n", "mean", "sd", "min", "max"
    ));
    for (name, s) in data.names.iter().zip(&r.summaries) {
        let shown: String = name.chars().take(30).collect();
        let pad = name_w.saturating_sub(shown.chars().count());
        o.push_str(&format!(
            "{shown}{:pad$}  {:>8}  {:>16}  {:>12}  {:>16}  {:>16}\n",
            "",
            s.n,
            val(s.mean),
            s.sd().map_or("-".into(), |v| sig(v, 4)),
            val(s.min),
            val(s.max)
        ));
    }
    o.push('\n');
    o.push_str("One-way ANOVA\n");
    match &r.anova {
        Ok(t) => {
            o.push_str(&format!(
                "  {:<9} {:>16} {:>8} {:>16} {:>12} {:>10}\n",
                "source", "SS", "df", "MS", "F", "p"
            ));
            o.push_str(&format!(
                "  {:<9} {:>16} {:>8} {:>16} {:>12} {:>10}\n",
                "between",
                sig(t.ss_between, 8),
                t.df_between,
                sig(t.ms_between, 8),
                sig(t.f, 6),
                pval(t.p)
            ));
            o.push_str(&format!(
                "  {:<9} {:>16} {:>8} {:>16}\n",
                "within",
                sig(t.ss_within, 8),
                t.df_within,
                sig(t.ms_within, 8)
            ));
            o.push_str(&format!(
                "  {:<9} {:>16} {:>8}\n",
                "total",
                sig(t.ss_total, 8),
                t.df_total
            ));
            o.push_str(&format!(
                "  R-squared {}, residual SD {}\n",
                sig(t.r_squared, 4),
                sig(t.resid_sd, 4)
            ));
        }
        Err(e) => match &r.constant_groups {
            // Every group constant: the table's defined parts, F infinite.
            Ok(c) => {
                o.push_str(&format!(
                    "  {:<9} {:>16} {:>8} {:>16} {:>12}\n",
                    "source", "SS", "df", "MS", "F"
                ));
                o.push_str(&format!(
                    "  {:<9} {:>16} {:>8} {:>16} {:>12}\n",
                    "between",
                    sig(c.ss_between, 8),
                    c.df_between,
                    sig(c.ss_between / c.df_between, 8),
                    "infinite"
                ));
                o.push_str(&format!(
                    "  {:<9} {:>16} {:>8} {:>16}\n",
                    "within", "0", c.df_within, "0"
                ));
                o.push_str(&format!(
                    "  grand mean {}, R-squared 1: every group is constant, so all the variation lies between the groups\n",
                    sig(data.origin.plus_offset(c.grand_mean), 8)
                ));
            }
            Err(_) => o.push_str(&format!("  not available: {}\n", e.reason)),
        },
    }
    o.push('\n');
    o.push_str("Requirement checks (pass = no sign of a problem at the 5% level)\n");
    test_line(
        &mut o,
        "equal variances, Brown-Forsythe",
        "W",
        &r.brown_forsythe,
        true,
    );
    test_line(
        &mut o,
        "equal variances, Levene (mean)",
        "W",
        &r.levene,
        true,
    );
    test_line(&mut o, "equal variances, Bartlett", "T", &r.bartlett, true);
    match &r.sd_ratio {
        Ok(v) => o.push_str(&format!(
            "  {:<32} {}  {}\n",
            "largest/smallest group SD",
            sig(*v, 4),
            if *v <= crate::stats::oneway::SD_RATIO_LIMIT {
                "pass (rule of thumb <= 2)"
            } else {
                "attention (rule of thumb <= 2)"
            }
        )),
        Err(e) => o.push_str(&format!(
            "  {:<32} not available: {}\n",
            "largest/smallest group SD", e.reason
        )),
    }
    match &r.shapiro_wilk {
        Ok(t) => o.push_str(&format!(
            "  {:<32} W = {}, p = {}  {}\n",
            "normal residuals, Shapiro-Wilk",
            sig(t.w, 6),
            pval(t.p),
            verdict(t.p)
        )),
        Err(e) => o.push_str(&format!(
            "  {:<32} not available: {}\n",
            "normal residuals, Shapiro-Wilk", e.reason
        )),
    }
    match &r.dagostino_pearson {
        Ok(d) => o.push_str(&format!(
            "  {:<32} K2 = {}, p = {}  {}; skewness {} (SE {}), excess kurtosis {} (SE {})\n",
            "normal residuals, D'Agostino",
            sig(d.k2, 5),
            pval(d.p),
            verdict(d.p),
            sig(d.skewness, 3),
            sig(d.skewness_se, 2),
            sig(d.excess_kurtosis, 3),
            sig(d.excess_kurtosis_se, 2)
        )),
        Err(e) => o.push_str(&format!(
            "  {:<32} not available: {}\n",
            "normal residuals, D'Agostino", e.reason
        )),
    }
    match &r.outliers {
        Ok(c) => o.push_str(&format!(
            "  {:<32} {} (normal residuals give {}; p = {})  {}\n",
            "residuals beyond 3 SD",
            c.n,
            sig(c.expected, 3),
            pval(c.p),
            verdict(c.p)
        )),
        Err(e) => o.push_str(&format!(
            "  {:<32} not available: {}\n",
            "residuals beyond 3 SD", e.reason
        )),
    }
    o.push('\n');
    let l = &r.leading;
    o.push_str(&format!("Leading result: {}\n", l.method.name()));
    match (l.statistic, l.p) {
        (Some(f), Some(p)) => o.push_str(&format!(
            "  F = {}, p = {}: {}\n",
            sig(f, 6),
            pval(p),
            if p < options.alpha {
                "the group means differ"
            } else {
                "no difference between the group means shown"
            }
        )),
        (None, Some(p)) => o.push_str(&format!(
            "  p = {} (exact): {}\n",
            pval(p),
            if p < options.alpha {
                "the group means differ"
            } else {
                "no difference between the group means shown (too few values for a constant reading to be conclusive)"
            }
        )),
        _ if l.declined.is_some() => o.push_str("  no test: too few values per group to compare\n"),
        _ => o.push_str("  not available (see above)\n"),
    }
    o.push_str(&format!("  why: {}\n", l.reason));
    if l.recommend_kruskal_wallis {
        o.push_str(
            "  note: residuals look clearly non-normal and the groups are small; read Kruskal-Wallis too\n",
        );
    }
    o.push('\n');
    o.push_str("Robust alternatives\n");
    test_line(&mut o, "Welch ANOVA", "F", &r.welch, false);
    test_line(&mut o, "Brown-Forsythe F* (means)", "F*", &r.f_star, false);
    test_line(
        &mut o,
        "Kruskal-Wallis (ties corrected)",
        "H",
        &r.kruskal_wallis,
        false,
    );
    o.push('\n');
    o.push_str("Effect sizes\n");
    match &r.effect {
        Ok(e) => {
            o.push_str(&format!(
                "  eta-squared {}, omega-squared {}\n",
                sig(e.eta_squared, 4),
                sig(e.omega_squared, 4)
            ));
            o.push_str(&format!(
                "  spread of group means (max - min) {}",
                sig(e.mean_spread, 4)
            ));
            if let Some(pct) = e.mean_spread_pct_tolerance {
                o.push_str(&format!(" = {}% of the tolerance", sig(pct, 3)));
            }
            o.push('\n');
        }
        Err(e) => o.push_str(&format!("  not available: {}\n", e.reason)),
    }
    o.push('\n');
    render_components(&mut o, r);
    render_pairs(&mut o, data, r, options);
    render_effects(&mut o, data, r);
    render_sensitivity(&mut o, r);
    o.push_str(crate::CAUTION);
    o.push('\n');
    o
}

fn render_components(o: &mut String, r: &OneWay) {
    o.push_str("Variance components (random-effects one-way model)\n");
    match &r.variance_components {
        Ok(v) => {
            let ci = |c: &Stat<crate::stats::variance_components::Interval>| match c {
                Ok(i) => format!("[{}, {}]", sig(i.low, 4), sig(i.high, 4)),
                Err(e) => format!("not available: {}", e.reason),
            };
            o.push_str(&format!(
                "  between-group variance {} (SD {}), 95% interval {}\n",
                sig(v.between, 4),
                sig(v.between.sqrt(), 4),
                ci(&v.between_ci)
            ));
            o.push_str(&format!(
                "  within-group variance  {} (SD {}), 95% interval [{}, {}]\n",
                sig(v.within, 4),
                sig(v.within.sqrt(), 4),
                sig(v.within_ci.low, 4),
                sig(v.within_ci.high, 4)
            ));
            o.push_str(&format!(
                "  between-group share {}%, ICC {}, 95% interval {}\n",
                sig(100.0 * v.share_between, 3),
                sig(v.icc, 3),
                ci(&v.icc_ci)
            ));
            o.push_str(&format!("  methods: {}\n", v.method));
            for note in &v.notes {
                o.push_str(&format!("  note: {note}\n"));
            }
        }
        Err(e) => o.push_str(&format!("  not available: {}\n", e.reason)),
    }
    o.push('\n');
}

fn render_pairs(o: &mut String, data: &GroupedData, r: &OneWay, options: &OneWayOptions) {
    let significant = r.leading.p.is_some_and(|p| p < options.alpha);
    if !significant {
        o.push_str("Pairs: not listed, the leading result shows no difference (all pairs are in --json)\n\n");
        return;
    }
    let method = match r.leading.method {
        LeadingMethod::Welch | LeadingMethod::WelchBootstrap => "Games-Howell",
        LeadingMethod::ClassicF | LeadingMethod::ExactPermutation | LeadingMethod::FStar => {
            "Tukey-Kramer"
        }
    };
    o.push_str(&format!(
        "Pairs ({method}, {}% simultaneous intervals; * = interval excludes zero), largest difference first\n",
        // The intervals' own confidence (95 % unless set), to two decimals of a percent.
        (options.confidence * 10_000.0).round() / 100.0
    ));
    let mut ok: Vec<&crate::stats::posthoc::Pair> =
        r.pairs.iter().filter_map(|p| p.as_ref().ok()).collect();
    ok.sort_by(|x, y| y.diff.abs().total_cmp(&x.diff.abs()));
    for p in ok {
        let excludes_zero = p.ci_low > 0.0 || p.ci_high < 0.0;
        o.push_str(&format!(
            "  {} {} - {}: {} [{}, {}], p = {}\n",
            if excludes_zero { "*" } else { " " },
            data.names[p.a],
            data.names[p.b],
            sig(p.diff, 4),
            sig(p.ci_low, 4),
            sig(p.ci_high, 4),
            pval(p.p_adj)
        ));
    }
    for e in r.pairs.iter().filter_map(|p| p.as_ref().err()) {
        o.push_str(&format!("    (a pair is not available: {})\n", e.reason));
    }
    o.push('\n');
}

fn render_effects(o: &mut String, data: &GroupedData, r: &OneWay) {
    if r.group_effects.is_empty() {
        return;
    }
    o.push_str("Each group against the grand mean\n");
    for g in &r.group_effects {
        let mut line = format!(
            "  {}: {}{}",
            data.names[g.group_idx],
            if g.diff_from_grand >= 0.0 { "+" } else { "" },
            sig(g.diff_from_grand, 4)
        );
        if let Ok(sd) = g.diff_sd_units {
            line.push_str(&format!(" ({} within-group SD", sig(sd, 3)));
            if let Some(pct) = g.diff_pct_tolerance {
                line.push_str(&format!(", {}% of the tolerance", sig(pct, 3)));
            }
            line.push(')');
        } else if let Some(pct) = g.diff_pct_tolerance {
            line.push_str(&format!(" ({}% of the tolerance)", sig(pct, 3)));
        }
        o.push_str(&line);
        o.push('\n');
    }
    o.push('\n');
}

fn render_sensitivity(o: &mut String, r: &OneWay) {
    o.push_str("Sensitivity of the F test\n");
    match &r.sensitivity {
        Ok(s) => {
            match &s.min_detectable_diff {
                Ok(d) => {
                    o.push_str(&format!(
                        "  smallest difference between two group means detected with {}% power at alpha {}: {}",
                        sig(100.0 * s.power_target, 3),
                        s.alpha,
                        sig(*d, 4)
                    ));
                    if let Some(pct) = s.min_detectable_pct_tolerance {
                        o.push_str(&format!(" ({}% of the tolerance)", sig(pct, 3)));
                    }
                    o.push('\n');
                }
                Err(e) => o.push_str(&format!(
                    "  minimum detectable difference not available: {}\n",
                    e.reason
                )),
            }
            if let (Some(d), Some(p)) = (s.detect, s.power_at_detect) {
                o.push_str(&format!(
                    "  power to detect a difference of {} with these group sizes: {}%\n",
                    sig(d, 4),
                    sig(100.0 * p, 3)
                ));
            }
            match &s.n_needed {
                Some(Ok(n)) => o.push_str(&format!(
                    "  measurements per group needed for that difference: {n}\n"
                )),
                Some(Err(e)) => o.push_str(&format!(
                    "  measurements per group needed: not available: {}\n",
                    e.reason
                )),
                None => {}
            }
        }
        Err(e) => o.push_str(&format!("  not available: {}\n", e.reason)),
    }
    o.push('\n');
}
