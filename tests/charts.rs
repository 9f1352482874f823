//! Chart content tests: build invented inputs (tests/report_inputs, all values INVENTED), render
//! SVG, parse it with roxmltree and check what matters.

#[path = "report_inputs/mod.rs"]
mod inputs;

use samewise::report::*;

const LEVELS: [&str; 4] = ["M1", "M4", "M7", "M9"];

mod svg;
use svg::*;

/// Vertical black lines (event markers) inside a panel: their x.
fn vertical_black_lines(svg: &Svg, p: &Panel) -> Vec<f64> {
    svg.shapes
        .iter()
        .filter(|s| s.tag == "polyline" && s.stroke == BLACK && s.points.len() == 2)
        .filter(|s| {
            let ((x0, y0), (x1, y1)) = (s.points[0], s.points[1]);
            x0 == x1 && (y0 - y1).abs() > 0.9 * (p.bottom - p.top) && x0 > p.left && x0 < p.right
        })
        .map(|s| s.points[0].0)
        .collect()
}

/// y tick labels (right-anchored numbers left of the panel) against their pixel y.
fn y_ticks(svg: &Svg, p: &Panel) -> Vec<(f64, f64)> {
    svg.texts
        .iter()
        .filter(|t| t.anchor == "end" && (t.x - (p.left - 10.0)).abs() < 1.0)
        .filter_map(|t| {
            t.text
                .trim_end_matches('%')
                .parse::<f64>()
                .ok()
                .map(|v| (v, t.y))
        })
        .collect()
}

// ---------------------------------------------------------------------------------------------
// Trend

#[test]
fn trend_has_one_series_per_group_with_a_point_per_period() {
    let input = inputs::trend("bore diameter", "machine", &LEVELS, 30);
    let chart = draw_trend(&input, Format::Svg, Size::DEFAULT).unwrap();
    let svg = parse_svg(&chart.bytes);
    assert_eq!((svg.width, svg.height), (1280.0, 680.0));
    let p = &chart.layout.panels[0];
    // Group markers: M1 filled circles (blue), M4 squares (vermillion), M7 triangles (bluish
    // green), M9 diamonds (reddish purple); one per period inside the panel.
    assert_eq!(svg.group_markers(p), [30, 30, 30, 30]);
    // Each mean sits at its value's pixel y (within plotters' 1-pixel rounding).
    let m1: Vec<f64> = input.periods.iter().map(|p| p.groups[0].mean).collect();
    let mut ys: Vec<(f64, f64)> = svg
        .inside(p)
        .filter(|s| s.tag == "circle" && s.fill == BLUE)
        .map(|s| s.points[0])
        .collect();
    ys.sort_by(|a, b| a.0.total_cmp(&b.0));
    for ((_, y), mean) in ys.iter().zip(&m1) {
        assert!((y - p.y_px(*mean)).abs() <= 1.0, "{y} vs {}", p.y_px(*mean));
    }
    // Legend: one entry per group and per reference line, flags and events.
    for entry in LEVELS.iter().copied().chain([
        "spec limits",
        "target",
        "flagged: differs, material",
        "flagged: differs",
        "process change",
    ]) {
        assert!(svg.has_text(entry), "legend entry {entry} missing");
    }
}

#[test]
fn trend_axis_fits_the_data_and_names_limits_beyond_it() {
    let mut input = inputs::trend("bore diameter", "machine", &LEVELS, 30);
    // Put one interval beyond the upper limit: the axis must cover it, and the upper limit then
    // lies inside the axis and is drawn as a line at its value.
    input.periods[3].groups[2].ci_high = Some(12.071);
    let chart = draw_trend(&input, Format::Svg, Size::DEFAULT).unwrap();
    let svg = parse_svg(&chart.bytes);
    let p = &chart.layout.panels[0];
    let values = || {
        input
            .periods
            .iter()
            .flat_map(|p| &p.groups)
            .flat_map(|g| [Some(g.mean), g.ci_low, g.ci_high])
            .flatten()
    };
    let lo = values().fold(f64::INFINITY, f64::min);
    let hi = values().fold(f64::NEG_INFINITY, f64::max);
    assert_eq!(hi, 12.071);
    assert!(p.y_min < lo && p.y_max > hi, "{p:?}");
    // The axis fits the data (6 % padding), not the limits: the lower limit lies below it.
    assert!(p.y_min > lo - 0.07 * (hi - lo), "{p:?}");
    assert!(p.y_min > 11.95, "{p:?}");
    // The tick labels printed in the SVG agree with the layout's mapping, so the layout is what
    // was drawn.
    let ticks = y_ticks(&svg, p);
    assert!(ticks.len() >= 4, "{ticks:?}");
    for (v, y) in ticks {
        assert!(
            (p.y_px(v) - y).abs() <= 1.0,
            "tick {v} at {y}, layout {}",
            p.y_px(v)
        );
    }
    // The upper limit inside the axis: its label at its value. The lower limit below the axis:
    // named with its value and an arrow at the panel's bottom edge.
    let t = svg.text("USL 12.050");
    assert_eq!(t.len(), 1);
    assert!((t[0].y - p.y_px(12.05)).abs() <= 1.0);
    let below = svg.text("LSL 11.950 \u{2193}");
    assert_eq!(below.len(), 1, "{:?}", svg.texts);
    assert!((below[0].y - p.bottom).abs() <= 20.0, "{below:?} {p:?}");
    assert!(svg.has_text("target 12.000"));
    assert!(svg.has_text("bore diameter (mm)"));
}

/// The standing-out group of a finding is drawn in colour on top and the others muted in grey
/// without intervals; the legend names both.
#[test]
fn trend_highlights_the_standing_out_group() {
    let mut input = inputs::trend("bore diameter", "machine", &LEVELS, 30);
    input.highlight = Some(LEVELS[2].to_string());
    let chart = draw_trend(&input, Format::Svg, Size::DEFAULT).unwrap();
    let svg = parse_svg(&chart.bytes);
    assert!(svg.has_text(&format!("{} (stands out)", LEVELS[2])));
    assert!(svg.has_text(&format!("the other {} groups", LEVELS.len() - 1)));
    let muted = svg
        .shapes
        .iter()
        .filter(|s| s.tag == "circle" && s.fill == "#AFAFAF")
        .count();
    let coloured = svg
        .shapes
        .iter()
        .filter(|s| s.tag == "circle" && s.fill != "#AFAFAF")
        .count();
    assert!(
        muted >= 30 * (LEVELS.len() - 1) - 5,
        "{muted} muted markers"
    );
    assert!(coloured < muted, "{coloured} coloured markers");
}

#[test]
fn trend_event_markers_are_at_the_event_times() {
    let input = inputs::trend("bore diameter", "machine", &LEVELS, 30);
    let chart = draw_trend(&input, Format::Svg, Size::DEFAULT).unwrap();
    let svg = parse_svg(&chart.bytes);
    let p = &chart.layout.panels[0];
    let lines = vertical_black_lines(&svg, p);
    assert_eq!(lines.len(), input.events.len(), "{lines:?}");
    for e in &input.events {
        let x = p.x_px(time_to_x(e.at));
        assert!(
            lines.iter().any(|l| (l - x).abs() <= 1.0),
            "no line at {x} for {}",
            e.label
        );
        // Its label starts just right of the line.
        let t = svg.text(&e.label);
        assert_eq!(t.len(), 1);
        assert!((t[0].x - (x + 10.0)).abs() <= 1.0);
    }
    // The x of the layout is time: the event at day 15 + 3 h sits 3/24 of a period right of
    // the start of period 15.
    let p15 = &input.periods[14];
    let frac = (p.x_value(p.x_px(time_to_x(input.events[0].at))) - time_to_x(p15.start))
        / (time_to_x(p15.end) - time_to_x(p15.start));
    assert!((frac - 0.125).abs() < 1e-9);
}

#[test]
fn trend_marks_flagged_periods_on_the_time_axis() {
    let input = inputs::trend("bore diameter", "machine", &LEVELS, 30);
    let chart = draw_trend(&input, Format::Svg, Size::DEFAULT).unwrap();
    let svg = parse_svg(&chart.bytes);
    let p = &chart.layout.panels[0];
    // Filled vermillion triangles just below the axis: one per "differs, material" period.
    let below: Vec<f64> = svg
        .shapes
        .iter()
        .filter(|s| s.tag == "polygon" && s.fill == VERMILLION && s.points.len() == 3)
        .filter(|s| centre(s).1 > p.bottom && centre(s).1 < p.bottom + 30.0)
        .map(|s| s.points[0].0)
        .collect();
    let material: Vec<f64> = input
        .periods
        .iter()
        .filter(|q| q.state == FlagState::DiffersMaterial)
        .map(|q| p.x_px((time_to_x(q.start) + time_to_x(q.end)) / 2.0))
        .collect();
    assert_eq!(below.len(), material.len());
    for (a, b) in below.iter().zip(&material) {
        assert!((a - b).abs() <= 1.0);
    }
    // Shaded bands over the flagged periods (3 of them: two material, one differs).
    let bands = svg
        .inside(p)
        .filter(|s| s.tag == "rect" && (s.opacity - 0.16).abs() < 1e-9)
        .count();
    assert_eq!(bands, 3);
}

#[test]
fn user_text_is_escaped_inside_svg() {
    let hostile = ["<script>alert(1)</script>", "M&M \"A\"", "O'Neil <b>"];
    let input = inputs::trend("Ø <bore> & \"hole\"", "machine & line", &hostile, 10);
    let chart = draw_trend(&input, Format::Svg, Size::DEFAULT).unwrap();
    let text = std::str::from_utf8(&chart.bytes).unwrap();
    assert!(!text.contains("<script"), "raw script tag in SVG");
    assert!(!text.contains("<b>"));
    let svg = parse_svg(&chart.bytes);
    for h in hostile {
        assert!(svg.has_text(h), "{h} not shown as text");
    }
    assert!(svg.has_text("Ø <bore> & \"hole\" by machine & line"));
}

// ---------------------------------------------------------------------------------------------
// Share

#[test]
fn share_chart_draws_each_estimate_and_skips_missing_ones() {
    let input = inputs::share("bore diameter", "machine", 30);
    let chart = draw_share(&input, Format::Svg, Size::new(1280, 520)).unwrap();
    let svg = parse_svg(&chart.bytes);
    let p = &chart.layout.panels[0];
    assert_eq!(p.y_min, 0.0);
    let max = input
        .periods
        .iter()
        .filter_map(|q| q.ci_high)
        .fold(0.0, f64::max);
    assert!(p.y_max >= max * 100.0 && p.y_max <= 100.0);
    let mut dots: Vec<(f64, f64)> = svg
        .inside(p)
        .filter(|s| s.tag == "circle" && s.fill == BLUE)
        .map(|s| s.points[0])
        .collect();
    dots.sort_by(|a, b| a.0.total_cmp(&b.0));
    let estimates: Vec<f64> = input.periods.iter().filter_map(|q| q.share).collect();
    assert_eq!(dots.len(), 29);
    assert_eq!(estimates.len(), 29);
    for ((_, y), v) in dots.iter().zip(&estimates) {
        assert!((y - p.y_px(v * 100.0)).abs() <= 1.0);
    }
    for (v, y) in y_ticks(&svg, p) {
        assert!((p.y_px(v) - y).abs() <= 1.0);
    }
    let material = svg.text("material 10%");
    assert_eq!(material.len(), 1);
    assert!((material[0].y - p.y_px(10.0)).abs() <= 1.0);
    assert!(svg.has_text("no estimate (too little data)"));
    assert_eq!(vertical_black_lines(&svg, p).len(), 1);
}

#[test]
fn share_rejects_percentages_and_empty_input() {
    let mut input = inputs::share("bore diameter", "machine", 5);
    input.periods[1].share = Some(35.0);
    let err = draw_share(&input, Format::Svg, Size::DEFAULT).unwrap_err();
    assert!(err.to_string().contains("2026-11-02"), "{err}");
    assert!(err.to_string().contains("fraction"), "{err}");
    input.periods.clear();
    let err = draw_share(&input, Format::Svg, Size::DEFAULT).unwrap_err();
    assert!(err.to_string().contains("no periods"), "{err}");
}

// ---------------------------------------------------------------------------------------------
// Detail

#[test]
fn detail_shows_every_value_and_a_qq_point_per_residual() {
    let input = inputs::detail(&LEVELS);
    let chart = draw_detail(&input, Format::Svg, Size::DEFAULT).unwrap();
    let svg = parse_svg(&chart.bytes);
    assert_eq!(chart.layout.panels.len(), 2);
    let (values, qq) = (&chart.layout.panels[0], &chart.layout.panels[1]);
    for (gi, colour) in [BLUE, VERMILLION, BLUISH_GREEN, REDDISH_PURPLE]
        .iter()
        .enumerate()
    {
        // Value dots are open circles in the group's colour.
        let mut ys: Vec<f64> = svg
            .inside(values)
            .filter(|s| s.tag == "circle" && s.stroke == *colour && s.fill == "none")
            .map(|s| s.points[0].1)
            .collect();
        let mut expected: Vec<f64> = input.groups[gi]
            .values
            .iter()
            .map(|v| values.y_px(*v))
            .collect();
        ys.sort_by(f64::total_cmp);
        expected.sort_by(f64::total_cmp);
        assert_eq!(ys.len(), 12);
        for (a, b) in ys.iter().zip(&expected) {
            assert!((a - b).abs() <= 1.0);
        }
        assert!(svg.has_text(LEVELS[gi]));
    }
    // Range covers values and limits.
    assert!(values.y_min < 11.95 && values.y_max > 12.05);
    let qq_points = svg
        .inside(qq)
        .filter(|s| s.tag == "circle" && s.fill == BLUE)
        .count();
    assert_eq!(qq_points, input.residuals.len());
    // The Q-Q x axis spans the normal scores of 48 points: Blom positions give about +-2.24
    // (Phi^-1((48 - 0.375) / 48.25) = 2.2376, from scipy.stats.norm.ppf, computed by hand).
    assert!(qq.x_min < -2.2376 && qq.x_max > 2.2376);
    assert!(svg.has_text("grand mean"));
    assert!(svg.has_text("standard normal quantile"));
}

// ---------------------------------------------------------------------------------------------
// Grid

#[test]
fn grid_draws_one_cell_per_row_and_day_with_a_symbol_per_state() {
    let input = inputs::grid(6, &["machine", "supplier", "shift"], 30);
    let chart = draw_grid(&input, Format::Svg, grid_natural_size(&input)).unwrap();
    let svg = parse_svg(&chart.bytes);
    let p = &chart.layout.panels[0];
    let count = |state: FlagState| -> usize {
        input
            .rows
            .iter()
            .flat_map(|r| &r.cells)
            .filter(|s| **s == state)
            .count()
    };
    let cells = |fill: &str| {
        svg.inside(p)
            .filter(|s| s.tag == "rect" && s.fill == fill && s.opacity == 1.0)
            .filter(|s| (s.points[1].0 - s.points[0].0) > 15.0)
            .count()
    };
    assert_eq!(cells(VERMILLION), count(FlagState::DiffersMaterial));
    assert_eq!(cells("#E69F00"), count(FlagState::Differs));
    assert_eq!(cells("#C4E8DC"), count(FlagState::NoEvidence));
    assert_eq!(cells("#DEDEDE"), count(FlagState::TooLittleData));
    // Second cue besides colour: diamonds on material cells, triangles on differs cells.
    let diamonds = svg
        .inside(p)
        .filter(|s| s.tag == "polygon" && s.fill == BLACK && s.points.len() == 4)
        .count();
    let triangles = svg
        .inside(p)
        .filter(|s| s.tag == "polygon" && s.fill == BLACK && s.points.len() == 3)
        .count();
    assert_eq!(diamonds, count(FlagState::DiffersMaterial));
    assert_eq!(triangles, count(FlagState::Differs));
    assert_eq!(p.x_max, 30.0);
    assert_eq!(p.y_min, 18.0);
    for s in FlagState::ALL {
        assert!(svg.has_text(s.label()), "legend {}", s.label());
    }
    assert!(svg.has_text("characteristic 06 · shift"));
    assert!(svg.has_text("30"));
}

#[test]
fn grid_rejects_rows_of_the_wrong_length() {
    let mut input = inputs::grid(2, &["machine"], 10);
    input.rows[1].cells.pop();
    let err = draw_grid(&input, Format::Svg, Size::DEFAULT).unwrap_err();
    assert!(err.to_string().contains("9 cells for 10 days"), "{err}");
}

// ---------------------------------------------------------------------------------------------
// Before / after

#[test]
fn before_after_has_a_panel_per_group_with_the_event_and_both_means() {
    let input = inputs::before_after(&LEVELS[..3]);
    let chart = draw_before_after(&input, Format::Svg, Size::new(1280, 760)).unwrap();
    let svg = parse_svg(&chart.bytes);
    assert_eq!(chart.layout.panels.len(), 3);
    let x_event = time_to_x(input.event.at);
    for (gi, p) in chart.layout.panels.iter().enumerate() {
        let g = &input.groups[gi];
        let lines = vertical_black_lines(&svg, p);
        assert!(lines.iter().any(|x| (x - p.x_px(x_event)).abs() <= 1.0));
        // Mean after: one solid black horizontal segment from the event to the window end.
        let after = p.y_px(g.mean_after.unwrap());
        assert!(svg.shapes.iter().any(|s| s.tag == "polyline"
            && s.stroke == BLACK
            && s.points.len() == 2
            && (s.points[0].1 - after).abs() <= 1.0
            && (s.points[0].0 - p.x_px(x_event)).abs() <= 1.0
            && (s.points[1].0 - p.right).abs() <= 1.0));
        // Mean before: dashed, so many short pieces, all at the same y left of the event.
        let before = p.y_px(g.mean_before.unwrap());
        let pieces = svg
            .shapes
            .iter()
            .filter(|s| s.tag == "polyline" && s.stroke == BLACK && s.points.len() == 2)
            .filter(|s| s.points.iter().all(|q| (q.1 - before).abs() <= 1.0))
            .filter(|s| s.points[1].0 <= p.x_px(x_event) + 1.0 && s.points[0].0 >= p.left)
            .count();
        assert!(pieces > 10, "{pieces}");
        assert!(svg.has_text(LEVELS[gi]));
        assert!(p.y_min < 11.95 && p.y_max > 12.05);
    }
    assert!(
        svg.has_text("shift +0.0136 mm")
            || svg.texts.iter().any(|t| t.text.starts_with("shift +0.01"))
    );
    assert_eq!(svg.text(&input.event.label).len(), 1);
}

#[test]
fn before_after_rejects_an_event_outside_the_window() {
    let mut input = inputs::before_after(&LEVELS[..2]);
    input.event.at = input.window_end + chrono::Duration::days(3);
    let err = draw_before_after(&input, Format::Svg, Size::DEFAULT).unwrap_err();
    assert!(err.to_string().contains("outside the window"), "{err}");
}

// ---------------------------------------------------------------------------------------------
// PNG

fn decode_png(bytes: &[u8]) -> (u32, u32, Vec<u8>) {
    let decoder = png::Decoder::new(bytes);
    let mut reader = decoder.read_info().expect("PNG header");
    let mut buf = vec![0; reader.output_buffer_size()];
    let info = reader.next_frame(&mut buf).expect("PNG frame");
    assert_eq!(info.color_type, png::ColorType::Rgb);
    buf.truncate(info.buffer_size());
    (info.width, info.height, buf)
}

/// Dark pixels (all channels below 100) in a rectangle.
fn dark_pixels(w: u32, rgb: &[u8], x0: u32, y0: u32, x1: u32, y1: u32) -> usize {
    let mut n = 0;
    for y in y0..y1 {
        for x in x0..x1 {
            let i = ((y * w + x) * 3) as usize;
            if rgb[i] < 100 && rgb[i + 1] < 100 && rgb[i + 2] < 100 {
                n += 1;
            }
        }
    }
    n
}

#[test]
fn png_of_every_chart_renders_with_text() {
    let dir = inputs::artifact_dir("charts");
    let grid = inputs::grid(8, &["machine", "supplier"], 30);
    let charts: Vec<(&str, Chart)> = vec![
        (
            "trend",
            draw_trend(
                &inputs::trend("bore diameter", "machine", &LEVELS, 30),
                Format::Png,
                Size::DEFAULT,
            )
            .unwrap(),
        ),
        (
            "share",
            draw_share(
                &inputs::share("bore diameter", "machine", 30),
                Format::Png,
                Size::new(1280, 520),
            )
            .unwrap(),
        ),
        (
            "detail",
            draw_detail(&inputs::detail(&LEVELS), Format::Png, Size::DEFAULT).unwrap(),
        ),
        (
            "grid",
            draw_grid(&grid, Format::Png, grid_natural_size(&grid)).unwrap(),
        ),
        (
            "before_after",
            draw_before_after(
                &inputs::before_after(&LEVELS[..3]),
                Format::Png,
                Size::new(1280, 760),
            )
            .unwrap(),
        ),
    ];
    for (name, chart) in charts {
        std::fs::write(dir.join(format!("{name}.png")), &chart.bytes).unwrap();
        let (w, h, rgb) = decode_png(&chart.bytes);
        assert_eq!((w, h), (chart.layout.width, chart.layout.height), "{name}");
        // The title is black bold text from the embedded font at (24, 14): its box must hold
        // dark pixels, and the blank margin above it none.
        let title = dark_pixels(w, &rgb, 24, 14, 400, 46);
        assert!(title > 500, "{name}: only {title} dark pixels in the title");
        assert_eq!(
            dark_pixels(w, &rgb, 0, 0, w, 8),
            0,
            "{name}: ink in the top margin"
        );
    }
}

#[test]
fn format_follows_the_file_name() {
    use std::path::Path;
    assert_eq!(
        Format::from_path(Path::new("a/trend.SVG")),
        Some(Format::Svg)
    );
    assert_eq!(Format::from_path(Path::new("trend.png")), Some(Format::Png));
    assert_eq!(Format::from_path(Path::new("trend.pdf")), None);
}

#[test]
fn too_small_a_size_is_an_error_not_a_panic() {
    let input = inputs::trend("bore diameter", "machine", &LEVELS, 30);
    let err = draw_trend(&input, Format::Png, Size::new(100, 100)).unwrap_err();
    assert!(err.to_string().contains("100x100"), "{err}");
    let err = draw_trend(&input, Format::Svg, Size::new(1280, 250)).unwrap_err();
    assert!(err.to_string().contains("taller"), "{err}");
}

// ---------------------------------------------------------------------------------------------
// Month report (text-level checks; tests/browser.rs renders it in Chromium)

#[test]
fn month_report_is_self_contained_and_escapes_user_text() {
    let levels = ["<script>alert(1)</script>", "M&M \"A\"", "M7"];
    let report = inputs::month_report("Plant <Nord> & Co", 2, &["machine"], &levels, 30);
    let html = render_month_report(&report);
    // Nothing fetched: no external URL, no script, no link, no iframe, no img src.
    for bad in [
        "https://",
        "<script",
        "<link",
        "<iframe",
        "<img",
        "src=\"http",
        "@import",
    ] {
        let hits: Vec<_> = html.match_indices(bad).collect();
        assert!(hits.is_empty(), "{bad} found in report");
    }
    // The only http:// text is the SVG namespace.
    assert_eq!(
        html.matches("http://").count(),
        html.matches("http://www.w3.org/2000/svg").count()
    );
    assert!(html.contains("Plant &lt;Nord&gt; &amp; Co"));
    assert!(html.contains("&lt;script&gt;alert(1)&lt;/script&gt;"));
    assert!(html.contains("M&amp;M &quot;A&quot;"));
    assert!(html.contains(&samewise::report::escape_html(samewise::CAUTION)));
    // One inline SVG per chart: grid + 2 characteristics x (trend + share) + 1 before/after.
    assert_eq!(html.matches("<svg ").count(), 6);
    assert!(!html.contains("could not be drawn"));
    for section in [
        "Summary of the month",
        "What is new",
        "Flagged checks",
        "Pairwise comparisons",
        "Requirement checks",
        "Data coverage",
        "Methods",
    ] {
        assert!(html.contains(section), "{section}");
    }
    assert!(html.contains("Benjamini, Y. and Hochberg, Y. (1995)"));
}

#[test]
fn month_report_survives_a_chart_that_cannot_be_drawn() {
    let levels = ["M1", "M4"];
    let mut report = inputs::month_report("Plant", 1, &["machine"], &levels, 10);
    report.characteristics[0].factors[0].trend.periods.clear();
    let html = render_month_report(&report);
    assert!(html.contains("1 chart(s) could not be drawn"));
    assert!(html.contains("no periods to draw"));
    assert_eq!(html.matches("<svg ").count(), 3);
}

#[test]
fn too_short_a_chart_is_refused_with_the_size_named() {
    // Trend, share and detail need a plotting area of at least 80 pixels between header and
    // axis labels; 1280x200 leaves less, which each names instead of drawing a squashed plot.
    let size = Size::new(1280, 200);
    let errors = [
        draw_trend(
            &inputs::trend("bore diameter", "machine", &LEVELS, 5),
            Format::Svg,
            size,
        )
        .unwrap_err(),
        draw_share(
            &inputs::share("bore diameter", "machine", 5),
            Format::Svg,
            size,
        )
        .unwrap_err(),
        draw_detail(&inputs::detail(&LEVELS), Format::Svg, size).unwrap_err(),
    ];
    for err in errors {
        let text = err.to_string();
        assert!(text.contains("1280x200 pixels leave no room"), "{text}");
        assert!(text.contains("make the chart taller"), "{text}");
    }
    // The default size has room for each.
    assert!(draw_trend(
        &inputs::trend("bore diameter", "machine", &LEVELS, 5),
        Format::Svg,
        Size::DEFAULT
    )
    .is_ok());
}

/// Issue 16: with small shares the axis steps by 2.5 %, and each tick says its own value
/// ("2.5%", "7.5%"), not a rounded one ("2%", "8%") that sits at another height.
#[test]
fn issue_16_share_ticks_say_their_own_value() {
    let mut input = inputs::share("bore diameter", "machine", 30);
    input.material_share = None;
    for q in input.periods.iter_mut().filter(|q| q.share.is_some()) {
        q.share = Some(0.03);
        q.ci_low = Some(0.01);
        q.ci_high = Some(0.08);
    }
    let chart = draw_share(&input, Format::Svg, Size::new(1280, 520)).unwrap();
    let svg = parse_svg(&chart.bytes);
    let p = &chart.layout.panels[0];
    let ticks = y_ticks(&svg, p);
    assert!(
        ticks.iter().any(|(v, _)| (*v - 2.5).abs() < 1e-9),
        "{ticks:?}"
    );
    for (v, y) in ticks {
        assert!((p.y_px(v) - y).abs() <= 1.0, "tick {v} drawn at {y}");
    }
}

/// Issue 16: a 90-day trend labels its time axis on calendar boundaries (Mondays, or month
/// starts when Mondays are too dense), never overlapping; a long event label is shown whole.
#[test]
fn trend_ticks_fall_on_week_or_month_starts_and_event_labels_are_whole() {
    use chrono::Datelike;
    let mut input = inputs::trend("bore diameter", "machine", &LEVELS[..3], 90);
    // Real calendar labels (the shared input numbers the days of November on past 30).
    for p in &mut input.periods {
        p.label = (p.start + chrono::Duration::hours(1))
            .format("%Y-%m-%d")
            .to_string();
    }
    let long = "new boring-bar insert holder fitted on machine M4 by maintenance";
    input.events[0].label = long.to_string();
    let chart = draw_trend(&input, Format::Svg, Size::DEFAULT).unwrap();
    let svg = parse_svg(&chart.bytes);
    let mut ticks: Vec<(chrono::NaiveDate, f64)> = svg
        .texts
        .iter()
        .filter_map(|t| {
            chrono::NaiveDate::parse_from_str(&t.text, "%Y-%m-%d")
                .ok()
                .map(|d| (d, t.x))
        })
        .collect();
    ticks.sort_by(|a, b| a.1.total_cmp(&b.1));
    assert!(ticks.len() >= 3, "{ticks:?}");
    let mondays = ticks
        .iter()
        .all(|(d, _)| d.weekday() == chrono::Weekday::Mon);
    let months = ticks.iter().all(|(d, _)| d.day() == 1);
    assert!(mondays || months, "{ticks:?}");
    for w in ticks.windows(2) {
        assert!(w[1].1 - w[0].1 > 70.0, "labels too close: {ticks:?}");
    }
    assert!(
        svg.has_text(long),
        "the event label is cut: {:?}",
        svg.texts
    );
}

/// Issue 16: more than 8 groups without a highlight are drawn as small multiples: one panel per
/// group on shared axes, each named; the size grows with the rows.
#[test]
fn trend_of_many_groups_is_drawn_as_small_multiples() {
    let names: Vec<String> = (1..=12).map(|i| format!("C{i:02}")).collect();
    let refs: Vec<&str> = names.iter().map(String::as_str).collect();
    let input = inputs::trend("pin pitch", "cavity", &refs, 20);
    let size = samewise::report::trend_size(&input);
    assert!(size.height > Size::DEFAULT.height, "{size:?}");
    let chart = draw_trend(&input, Format::Svg, size).unwrap();
    let panels = &chart.layout.panels;
    assert_eq!(panels.len(), 12);
    assert!(panels
        .iter()
        .all(|p| p.y_min == panels[0].y_min && p.y_max == panels[0].y_max));
    let svg = parse_svg(&chart.bytes);
    for n in &names {
        assert!(svg.has_text(n), "panel {n} named");
    }
    std::fs::write(
        std::env::temp_dir().join("samewise-small-multiples.svg"),
        &chart.bytes,
    )
    .unwrap();
}
