//! The monthly review report: one self-contained HTML file (inline SVG charts, inline CSS, the
//! DejaVu Sans font inlined as a data URL, no script, nothing fetched). Every piece of user text
//! (plant, characteristic, factor and level names, notes, event labels) is HTML-escaped here or,
//! inside the charts, by the SVG writer.
//!
//! A chart that cannot be drawn does not stop the report: its place shows the reason, and the
//! summary counts such charts.

use std::fmt::Write as _;
use std::sync::OnceLock;

use super::draw::format_sig;
use super::{
    draw_before_after, draw_grid, draw_share, draw_trend, grid_natural_size, trend_size, FlagState,
    Format, MethodNote, MonthReport, PairRow, Size,
};

/// Escapes text for HTML element content and attribute values.
pub fn escape_html(s: &str) -> String {
    let mut out = String::with_capacity(s.len() + 8);
    for ch in s.chars() {
        match ch {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            _ => out.push(ch),
        }
    }
    out
}

/// The methods samewise uses, with their published references (cited from memory of the
/// original papers; the statistics modules document each one in detail).
pub fn standard_methods() -> Vec<MethodNote> {
    let m = |name: &str, used_for: &str, reference: &str| MethodNote {
        name: name.to_string(),
        used_for: used_for.to_string(),
        reference: reference.to_string(),
    };
    vec![
        m(
            "One-way analysis of variance (classic F test)",
            "do the group means differ, when spreads are alike",
            "Fisher, R. A. (1925). Statistical Methods for Research Workers. Oliver and Boyd",
        ),
        m(
            "Welch's test",
            "do the group means differ, when spreads differ",
            "Welch, B. L. (1951). On the comparison of several mean values: an alternative approach. Biometrika 38, 330-336",
        ),
        m(
            "Kruskal-Wallis test",
            "rank-based check when values are far from normal",
            "Kruskal, W. H. and Wallis, W. A. (1952). Use of ranks in one-criterion variance analysis. JASA 47, 583-621",
        ),
        m(
            "Brown-Forsythe and Levene tests, Bartlett's test",
            "requirement check: equal spread in every group",
            "Levene, H. (1960), in Contributions to Probability and Statistics, Stanford University Press; Brown, M. B. and Forsythe, A. B. (1974). JASA 69, 364-367; Bartlett, M. S. (1937). Proc. R. Soc. A 160, 268-282",
        ),
        m(
            "Shapiro-Wilk test",
            "requirement check: normal residuals",
            "Shapiro, S. S. and Wilk, M. B. (1965). Biometrika 52, 591-611; Royston, P. (1995). Algorithm AS R94. Applied Statistics 44, 547-551",
        ),
        m(
            "Tukey-Kramer and Games-Howell comparisons",
            "which pairs of groups differ",
            "Tukey, J. W. (1953). The Problem of Multiple Comparisons (unpublished); Kramer, C. Y. (1956). Biometrics 12, 307-310; Games, P. A. and Howell, J. F. (1976). Journal of Educational Statistics 1, 113-125",
        ),
        m(
            "Benjamini-Hochberg (and Benjamini-Yekutieli) false discovery rate",
            "control of false flags across all checks of a run",
            "Benjamini, Y. and Hochberg, Y. (1995). JRSS B 57, 289-300; Benjamini, Y. and Yekutieli, D. (2001). Annals of Statistics 29, 1165-1188",
        ),
        m(
            "Variance components, one-way random-effects model (ANOVA estimator)",
            "between-group share of the variance and its interval",
            "Searle, S. R., Casella, G. and McCulloch, C. E. (1992). Variance Components. Wiley",
        ),
        m(
            "Normal Q-Q plot, Blom plotting positions",
            "period detail chart",
            "Blom, G. (1958). Statistical Estimates and Transformed Beta-Variables. Wiley",
        ),
        m(
            "Colour palette",
            "every chart",
            "Okabe, M. and Ito, K. (2008). Color Universal Design (CUD): how to make figures and presentations that are friendly to colorblind people",
        ),
    ]
}

const CSS: &str = r#"
:root { --ink: #222; --muted: #555; --line: #d0d0d0; --band: #f4f4f4; }
* { box-sizing: border-box; }
body { font-family: "DejaVu Sans", Verdana, sans-serif; color: var(--ink); margin: 0 auto;
  max-width: 1320px; padding: 24px 28px 60px; font-size: 16px; line-height: 1.45; }
h1 { font-size: 30px; margin: 0 0 4px; }
h2 { font-size: 24px; margin: 36px 0 10px; padding-bottom: 4px; border-bottom: 3px solid #0072B2; }
h3 { font-size: 20px; margin: 26px 0 8px; }
h4 { font-size: 17px; margin: 18px 0 6px; }
.meta { color: var(--muted); margin: 0 0 12px; }
.caution { border: 2px solid #D55E00; background: #fff4ec; padding: 10px 14px; font-weight: bold; }
nav ol { margin: 8px 0; }
table { border-collapse: collapse; margin: 8px 0 14px; font-size: 15px; }
th, td { border: 1px solid var(--line); padding: 4px 8px; text-align: left; vertical-align: top; }
th { background: #eef3f8; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
tbody tr:nth-child(even) { background: var(--band); }
.state { display: inline-block; padding: 1px 8px; border-radius: 3px; border: 1px solid #333; white-space: nowrap; }
.state.differs-material { background: #D55E00; color: #000; font-weight: bold; }
.state.differs-material::before { content: "\25C6  "; }
.state.differs { background: #E69F00; color: #000; }
.state.differs::before { content: "\25B2  "; }
.state.no-evidence { background: #c4e8dc; }
.state.no-evidence::before { content: "\2022  "; }
.state.not-independent { background: #faeccc; border-style: dashed; }
.state.not-independent::before { content: "\25B3  "; }
.state.too-little-data { background: repeating-linear-gradient(45deg, #dedede 0 5px, #fff 5px 8px); }
.state.not-run { background: #fff; border-color: #bbb; }
figure { margin: 10px 0 22px; }
figure svg { display: block; max-width: 100%; height: auto; border: 1px solid #e2e2e2; }
figure svg text { font-family: "DejaVu Sans", Verdana, sans-serif; }
figcaption { color: var(--muted); font-size: 14px; margin-top: 4px; }
.chart-error { border: 2px dashed #D55E00; padding: 8px 12px; }
ul.days { columns: 4; }
footer { margin-top: 40px; border-top: 1px solid var(--line); padding-top: 10px; }
@media print {
  body { max-width: none; padding: 0; font-size: 11pt; }
  figure, table, .caution { break-inside: avoid; }
  h2 { break-after: avoid; }
  nav { display: none; }
}
"#;

fn base64(bytes: &[u8]) -> String {
    const ALPHABET: &[u8; 64] = b"ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789+/";
    let mut out = String::with_capacity(bytes.len().div_ceil(3) * 4);
    for chunk in bytes.chunks(3) {
        let b = [
            chunk[0],
            chunk.get(1).copied().unwrap_or(0),
            chunk.get(2).copied().unwrap_or(0),
        ];
        let n = (u32::from(b[0]) << 16) | (u32::from(b[1]) << 8) | u32::from(b[2]);
        out.push(ALPHABET[(n >> 18) as usize & 63] as char);
        out.push(ALPHABET[(n >> 12) as usize & 63] as char);
        out.push(if chunk.len() > 1 {
            ALPHABET[(n >> 6) as usize & 63] as char
        } else {
            '='
        });
        out.push(if chunk.len() > 2 {
            ALPHABET[n as usize & 63] as char
        } else {
            '='
        });
    }
    out
}

/// `@font-face` rules carrying the embedded DejaVu Sans, so the browser lays text out with the
/// same font the charts were measured with: subsets with Latin, Greek, punctuation, arrows and
/// mathematical signs (`scripts/subset_fonts.py`; 145 kB instead of 1.4 MB), other characters
/// fall back to the browser's fonts.
fn font_css() -> &'static str {
    static CSS_FONTS: OnceLock<String> = OnceLock::new();
    CSS_FONTS.get_or_init(|| {
        format!(
            "@font-face {{ font-family: \"DejaVu Sans\"; font-weight: normal; src: url(data:font/ttf;base64,{}) format(\"truetype\"); }}\n\
             @font-face {{ font-family: \"DejaVu Sans\"; font-weight: bold; src: url(data:font/ttf;base64,{}) format(\"truetype\"); }}\n",
            base64(include_bytes!("../../assets/fonts/DejaVuSans-report.ttf")),
            base64(include_bytes!("../../assets/fonts/DejaVuSans-Bold-report.ttf"))
        )
    })
}

fn state_badge(state: FlagState) -> String {
    format!(
        "<span class=\"state {}\">{}</span>",
        state.key(),
        escape_html(state.label())
    )
}

fn fmt_p(p: f64) -> String {
    if !p.is_finite() {
        "n/a".to_string()
    } else if p < 0.0001 {
        "&lt; 0.0001".to_string()
    } else {
        format_sig(p, 3)
    }
}

fn fmt_signed(v: f64, digits: usize) -> String {
    let s = format_sig(v, digits);
    if v > 0.0 {
        format!("+{s}")
    } else {
        s.replacen('-', "\u{2212}", 1)
    }
}

/// Renders the chart or, when it cannot be drawn, a visible note; counts failures.
struct Figures {
    failures: usize,
}

impl Figures {
    fn figure(
        &mut self,
        out: &mut String,
        aria: &str,
        caption: &str,
        chart: crate::Result<super::Chart>,
    ) {
        match chart {
            Ok(c) => {
                let svg = String::from_utf8_lossy(&c.bytes);
                let start = svg.find("<svg").unwrap_or(0);
                let body = &svg[start..];
                let body = body.strip_prefix("<svg").unwrap_or(body);
                let _ = write!(
                    out,
                    "<figure><svg role=\"img\" aria-label=\"{}\"{}\n<figcaption>{}</figcaption></figure>\n",
                    escape_html(aria),
                    body,
                    escape_html(caption)
                );
            }
            Err(e) => {
                self.failures += 1;
                let _ = writeln!(
                    out,
                    "<p class=\"chart-error\">The chart \u{201c}{}\u{201d} could not be drawn: {}</p>",
                    escape_html(aria),
                    escape_html(&e.to_string())
                );
            }
        }
    }
}

/// Renders the whole monthly review report as one self-contained HTML document.
pub fn render_month_report(r: &MonthReport) -> String {
    let mut body = String::with_capacity(1 << 20);
    let mut figs = Figures { failures: 0 };
    let plant = escape_html(&r.plant);
    let month = escape_html(&r.month);

    // Summary.
    body.push_str("<section id=\"summary\"><h2>Summary of the month</h2>\n");
    let _ = writeln!(
        body,
        "<p><strong>{}</strong> checks ran this month (one check = one characteristic x factor in one period).</p>",
        r.counts.tests_run()
    );
    body.push_str("<table><thead><tr><th>outcome</th><th>checks</th></tr></thead><tbody>\n");
    for s in FlagState::ALL {
        let _ = writeln!(
            body,
            "<tr><td>{}</td><td class=\"num\">{}</td></tr>",
            state_badge(s),
            r.counts.get(s)
        );
    }
    body.push_str("</tbody></table>\n<h3>What is new</h3>\n");
    if r.new_this_month.is_empty() {
        body.push_str("<p>Nothing new compared with the previous month.</p>\n");
    } else {
        body.push_str("<ul>\n");
        for n in &r.new_this_month {
            let _ = writeln!(body, "<li>{}</li>", escape_html(n));
        }
        body.push_str("</ul>\n");
    }
    body.push_str("</section>\n");

    // Findings first: which group, how much, since when, after which change.
    body.push_str("<section id=\"findings\"><h2>Findings of the month</h2>\n");
    if r.findings.is_empty() {
        body.push_str(
            "<p>No finding: no group stood out in a flagged daily check this month (or the \
             findings were not brought up to date: run <code>samewise schedule due</code>).</p>\n",
        );
    } else {
        let _ = writeln!(
            body,
            "<p>{} finding(s), largest against the tolerance first. A finding joins the daily \
             flags of one characteristic x factor whose standing-out group is the same \
             (<code>samewise findings</code>).</p>",
            r.findings.len()
        );
    }
    for (i, f) in r.findings.iter().enumerate() {
        let _ = writeln!(
            body,
            "<h3 id=\"finding-{}\">#{} {} by {}: {} stands out <span class=\"meta\">({})</span></h3>",
            i + 1,
            f.id,
            escape_html(&f.characteristic),
            escape_html(&f.factor),
            escape_html(&f.level),
            escape_html(&f.status)
        );
        body.push_str("<ul>\n");
        for line in [Some(&f.since), Some(&f.effect), f.event.as_ref()]
            .into_iter()
            .flatten()
        {
            let _ = writeln!(body, "<li>{}</li>", escape_html(line));
        }
        for n in &f.notes {
            let _ = writeln!(body, "<li>Note {}</li>", escape_html(n));
        }
        body.push_str("</ul>\n");
        figs.figure(
            &mut body,
            &format!(
                "trend of {} by {}, {} highlighted",
                f.characteristic, f.factor, f.level
            ),
            "Group mean per day with 95% interval; the standing-out group in colour, the others in grey; shaded days were flagged.",
            draw_trend(&f.trend, Format::Svg, Size::DEFAULT),
        );
        if !f.pairs_period.is_empty() {
            let _ = writeln!(
                body,
                "<p>Pairs of {} whose simultaneous 95% interval excludes zero ({} other pair(s) include it):</p>",
                escape_html(&f.pairs_period),
                f.pairs_not_shown
            );
            pair_table(&mut body, &f.unit, &f.pairs);
        }
    }
    body.push_str("</section>\n");

    // Overview grid.
    if let Some(g) = &r.grid {
        body.push_str("<section id=\"overview\"><h2>Month overview</h2>\n");
        figs.figure(
            &mut body,
            &format!("month overview {}", g.title),
            "Each cell is one daily check; colour and symbol both give the outcome.",
            draw_grid(g, Format::Svg, grid_natural_size(g)),
        );
        body.push_str("</section>\n");
    }

    // Flagged items: the chronological list, collapsed (the findings above summarise them).
    body.push_str("<section id=\"flagged\"><h2>Flagged checks</h2>\n");
    if r.flagged.is_empty() {
        body.push_str("<p>No check was flagged this month.</p>\n");
    } else {
        let _ = writeln!(
            body,
            "<details><summary>All {} flagged checks of the month in time order, with their pairs</summary>",
            r.flagged.len()
        );
        body.push_str(
            "<table><thead><tr><th>characteristic</th><th>factor</th><th>period</th><th>outcome</th>\
             <th>test</th><th>p</th><th>q (after FDR)</th><th>between-group share</th>\
             <th>standing out</th><th>distance from grand mean</th><th>% of tolerance</th></tr></thead><tbody>\n",
        );
        for f in &r.flagged {
            let _ = writeln!(
                body,
                "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td class=\"num\">{}</td>\
                 <td class=\"num\">{}</td><td class=\"num\">{}</td><td>{}</td><td class=\"num\">{} {}</td><td class=\"num\">{}</td></tr>",
                escape_html(&f.characteristic),
                escape_html(&f.factor),
                escape_html(&f.period_label),
                state_badge(f.state),
                escape_html(&f.test),
                fmt_p(f.p_value),
                fmt_p(f.q_value),
                f.share_between
                    .map_or("n/a".to_string(), |s| format!("{:.1}%", s * 100.0)),
                escape_html(&f.standing_out),
                fmt_signed(f.diff_units, 3),
                escape_html(&f.unit),
                f.diff_pct_tolerance
                    .map_or("n/a".to_string(), |p| format!("{}%", fmt_signed(p, 3))),
            );
        }
        body.push_str("</tbody></table>\n<h3>Pairwise comparisons</h3>\n");
        for f in &r.flagged {
            let _ = writeln!(
                body,
                "<h4>{} by {}, {}</h4>",
                escape_html(&f.characteristic),
                escape_html(&f.factor),
                escape_html(&f.period_label)
            );
            if f.pairs.is_empty() {
                body.push_str("<p>No pairwise comparison available.</p>\n");
                continue;
            }
            // Pairs whose interval excludes zero; the rest counted (a plant of 32 cavities has
            // 496 pairs per check).
            let shown: Vec<PairRow> = f
                .pairs
                .iter()
                .filter(|p| p.ci_low > 0.0 || p.ci_high < 0.0)
                .cloned()
                .collect();
            let _ = writeln!(
                body,
                "<p>{} of {} pairs have a simultaneous 95% interval that excludes zero{}</p>",
                shown.len(),
                f.pairs.len(),
                if shown.is_empty() { "." } else { ":" }
            );
            if !shown.is_empty() {
                pair_table(&mut body, &f.unit, &shown);
            }
        }
        body.push_str("</details>\n");
    }
    body.push_str("</section>\n");

    // Charts per characteristic.
    body.push_str("<section id=\"characteristics\"><h2>Characteristics</h2>\n");
    for (ci, c) in r.characteristics.iter().enumerate() {
        let _ = writeln!(
            body,
            "<h3 id=\"characteristic-{}\">{}{}</h3>",
            ci + 1,
            escape_html(&c.characteristic),
            if c.unit.is_empty() {
                String::new()
            } else {
                format!(" ({})", escape_html(&c.unit))
            }
        );
        let limits = [
            c.limits.lsl.map(|v| format!("LSL {}", format_sig(v, 5))),
            c.limits
                .target
                .map(|v| format!("target {}", format_sig(v, 5))),
            c.limits.usl.map(|v| format!("USL {}", format_sig(v, 5))),
        ];
        let limits: Vec<String> = limits.into_iter().flatten().collect();
        if !limits.is_empty() {
            let _ = writeln!(body, "<p class=\"meta\">{}</p>", limits.join(" · "));
        }
        for f in &c.factors {
            let _ = writeln!(body, "<h4>by {}</h4>", escape_html(&f.trend.factor));
            figs.figure(
                &mut body,
                &format!("trend of {} by {}", f.trend.characteristic, f.trend.factor),
                "Group mean per period with 95% interval; shaded periods were flagged.",
                draw_trend(&f.trend, Format::Svg, trend_size(&f.trend)),
            );
            figs.figure(
                &mut body,
                &format!(
                    "between-group share of {} by {}",
                    f.share.characteristic, f.share.factor
                ),
                "Variance-components share between the groups, with its interval.",
                draw_share(&f.share, Format::Svg, Size::new(1280, 520)),
            );
        }
    }
    body.push_str("</section>\n");

    // Investigations.
    if !r.investigations.is_empty() {
        body.push_str("<section id=\"investigations\"><h2>Process changes investigated</h2>\n");
        for b in &r.investigations {
            let height = (260 + 150 * b.groups.len()).clamp(520, 3000) as u32;
            figs.figure(
                &mut body,
                &format!(
                    "{} by {} before and after {}",
                    b.characteristic, b.factor, b.event.label
                ),
                "Dashed: mean before the change; solid: mean after.",
                draw_before_after(b, Format::Svg, Size::new(1280, height)),
            );
        }
        body.push_str("</section>\n");
    }

    // Requirement notes.
    body.push_str("<section id=\"requirements\"><h2>Requirement checks</h2>\n");
    if r.requirement_notes.is_empty() {
        body.push_str("<p>No requirement check raised a note this month.</p>\n");
    } else {
        body.push_str("<table><thead><tr><th>characteristic</th><th>factor</th><th>period</th><th>note</th></tr></thead><tbody>\n");
        for n in &r.requirement_notes {
            let _ = writeln!(
                body,
                "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
                escape_html(&n.characteristic),
                escape_html(&n.factor),
                escape_html(&n.period_label),
                escape_html(&n.note)
            );
        }
        body.push_str("</tbody></table>\n");
    }
    body.push_str("</section>\n");

    // Coverage.
    let cov = &r.coverage;
    body.push_str("<section id=\"coverage\"><h2>Data coverage</h2>\n<table><tbody>\n");
    let _ = writeln!(
        body,
        "<tr><th>rows stored</th><td class=\"num\">{}</td></tr>\n<tr><th>rows rejected at import</th><td class=\"num\">{}</td></tr>\n<tr><th>days without data</th><td class=\"num\">{}</td></tr>",
        cov.rows_stored,
        cov.rows_rejected,
        cov.days_without_data.len()
    );
    body.push_str("</tbody></table>\n");
    if !cov.days_without_data.is_empty() {
        body.push_str("<p>Days without data:</p><ul class=\"days\">\n");
        for d in &cov.days_without_data {
            let _ = writeln!(body, "<li>{}</li>", d.format("%Y-%m-%d (%a)"));
        }
        body.push_str("</ul>\n");
    }
    if !cov.rows_by_characteristic.is_empty() {
        body.push_str(
            "<table><thead><tr><th>characteristic</th><th>rows stored</th></tr></thead><tbody>\n",
        );
        for (name, n) in &cov.rows_by_characteristic {
            let _ = writeln!(
                body,
                "<tr><td>{}</td><td class=\"num\">{}</td></tr>",
                escape_html(name),
                n
            );
        }
        body.push_str("</tbody></table>\n");
    }
    body.push_str("</section>\n");

    // Methods.
    body.push_str("<section id=\"methods\"><h2>Methods</h2>\n<table><thead><tr><th>method</th><th>used for</th><th>reference</th></tr></thead><tbody>\n");
    for m in &r.methods {
        let _ = writeln!(
            body,
            "<tr><td>{}</td><td>{}</td><td>{}</td></tr>",
            escape_html(&m.name),
            escape_html(&m.used_for),
            escape_html(&m.reference)
        );
    }
    body.push_str("</tbody></table>\n</section>\n");

    // Assemble.
    let mut out = String::with_capacity(body.len() + 2_200_000);
    let _ = write!(
        out,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
         <title>Monthly quality review {month}: {plant}</title>\n<style>\n{}{}</style>\n</head>\n<body>\n\
         <header><h1>Monthly quality review: {plant}</h1>\n<p class=\"meta\">Month {month} · generated {}</p>\n\
         <p class=\"caution\">{}</p></header>\n",
        font_css(),
        CSS,
        escape_html(&r.generated),
        escape_html(crate::CAUTION)
    );
    out.push_str("<nav><ol>\n<li><a href=\"#summary\">Summary of the month</a></li>\n");
    out.push_str("<li><a href=\"#findings\">Findings of the month</a></li>\n");
    if r.grid.is_some() {
        out.push_str("<li><a href=\"#overview\">Month overview</a></li>\n");
    }
    out.push_str("<li><a href=\"#flagged\">Flagged checks</a></li>\n<li><a href=\"#characteristics\">Characteristics</a><ol>\n");
    for (ci, c) in r.characteristics.iter().enumerate() {
        let _ = writeln!(
            out,
            "<li><a href=\"#characteristic-{}\">{}</a></li>",
            ci + 1,
            escape_html(&c.characteristic)
        );
    }
    out.push_str("</ol></li>\n");
    if !r.investigations.is_empty() {
        out.push_str("<li><a href=\"#investigations\">Process changes investigated</a></li>\n");
    }
    out.push_str(
        "<li><a href=\"#requirements\">Requirement checks</a></li>\n<li><a href=\"#coverage\">Data coverage</a></li>\n\
         <li><a href=\"#methods\">Methods</a></li>\n</ol></nav>\n",
    );
    if figs.failures > 0 {
        let _ = writeln!(
            out,
            "<p class=\"chart-error\">{} chart(s) could not be drawn; each place says why.</p>",
            figs.failures
        );
    }
    out.push_str(&body);
    let _ = write!(
        out,
        "<footer><p class=\"caution\">{}</p><p class=\"meta\">Made by samewise {}.</p></footer>\n</body>\n</html>\n",
        escape_html(crate::CAUTION),
        env!("CARGO_PKG_VERSION")
    );
    out
}

/// A table of pairwise differences with their simultaneous intervals.
fn pair_table(body: &mut String, unit: &str, pairs: &[PairRow]) {
    let _ = writeln!(
        body,
        "<table><thead><tr><th>pair</th><th>difference ({})</th><th>simultaneous 95% interval</th>\
         <th>adjusted p</th><th>method</th></tr></thead><tbody>",
        escape_html(unit)
    );
    for p in pairs {
        let _ = writeln!(
            body,
            "<tr><td>{} \u{2212} {}</td><td class=\"num\">{}</td><td class=\"num\">{} .. {}</td>\
             <td class=\"num\">{}</td><td>{}</td></tr>",
            escape_html(&p.a),
            escape_html(&p.b),
            fmt_signed(p.diff, 4),
            fmt_signed(p.ci_low, 4),
            fmt_signed(p.ci_high, 4),
            fmt_p(p.p_adj),
            escape_html(&p.method)
        );
    }
    body.push_str("</tbody></table>\n");
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn escape_covers_the_five_characters() {
        assert_eq!(
            escape_html(r#"<script>alert('x')</script> M&M "A""#),
            "&lt;script&gt;alert(&#39;x&#39;)&lt;/script&gt; M&amp;M &quot;A&quot;"
        );
    }

    #[test]
    fn base64_matches_rfc4648_test_vectors() {
        // RFC 4648, section 10 test vectors.
        for (plain, coded) in [
            ("", ""),
            ("f", "Zg=="),
            ("fo", "Zm8="),
            ("foo", "Zm9v"),
            ("foob", "Zm9vYg=="),
            ("fooba", "Zm9vYmE="),
            ("foobar", "Zm9vYmFy"),
        ] {
            assert_eq!(base64(plain.as_bytes()), coded);
        }
    }
}
