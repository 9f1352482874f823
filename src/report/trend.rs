//! The group trend chart: one characteristic, one factor, group means per period with their 95%
//! intervals, spec limits and target, process-change events, flagged periods.

use plotters::prelude::DrawingBackend;

use super::draw::{
    check_finite, draw_events, draw_outside_limits, draw_ref_lines, flag_event_legend,
    format_number, frame, group_dash, header_with_event_strip, limit_legend, limit_lines,
    padded_range, require_room, split_ref_lines, time_to_x, y_axis, Canvas, DrawResult, Drawable,
    Marker, Palette, Swatch, TimeAxis, MUTED,
};
use super::draw::{sizes, TextOpts};
use super::{Layout, Panel, Size, TrendInput};

pub(super) struct Trend<'a>(pub &'a TrendInput);

/// More groups than this, without a highlighted one, are drawn as small multiples: one small
/// panel per group on shared axes.
pub(super) const CROWDED_GROUPS: usize = 8;

/// Columns of the small multiples.
fn multiple_columns(n: usize) -> usize {
    if n <= 12 {
        3
    } else {
        4
    }
}

/// The size a trend needs: the default, or taller for small multiples (about 150 px a row).
pub fn trend_size(input: &TrendInput) -> Size {
    let levels = levels_in_order(
        input
            .periods
            .iter()
            .flat_map(|p| p.groups.iter().map(|g| g.level.as_str())),
    );
    if input.highlight.is_none() && levels.len() > CROWDED_GROUPS {
        let rows = levels.len().div_ceil(multiple_columns(levels.len()));
        Size::new(Size::DEFAULT.width, (190 + 150 * rows) as u32)
    } else {
        Size::DEFAULT
    }
}

impl Trend<'_> {
    /// One small panel per group, shared value and time axes, the group named in its panel;
    /// limits inside the shared range, flagged-period bands and events in every panel.
    fn draw_small_multiples<DB: DrawingBackend>(
        &self,
        c: &Canvas<DB>,
        size: Size,
        levels: &[String],
    ) -> DrawResult<Layout> {
        let t = self.0;
        let (w, h) = (size.width as f64, size.height as f64);
        let mut legend: Vec<(Swatch, String)> = vec![(
            Swatch::Series {
                color: Palette::group(0),
                marker: Marker::group(0),
                dash: None,
                line: true,
            },
            "group mean with 95% interval".to_string(),
        )];
        legend.extend(limit_legend(&t.limits));
        legend.extend(flag_event_legend(
            t.periods.iter().map(|p| p.state),
            !t.events.is_empty(),
        ));
        let title = format!("{} by {}", t.characteristic, t.factor);
        let subtitle = format!(
            "Group mean per period with 95% interval, one panel per group ({} groups), {} .. {}",
            levels.len(),
            t.periods[0].label,
            t.periods[t.periods.len() - 1].label
        );
        let (_, y) = header_with_event_strip(c, w, &title, &subtitle, &legend, false)?;
        let (x_min, x_max) = time_range(t.periods.iter().map(|p| (p.start, p.end)), &t.events);
        let values = t
            .periods
            .iter()
            .flat_map(|p| p.groups.iter())
            .flat_map(|g| [Some(g.mean), g.ci_low, g.ci_high])
            .flatten();
        let (y_min, y_max) = padded_range(values).ok_or("no finite value to draw")?;
        let (inside, _) = split_ref_lines(limit_lines(&t.limits, 5), y_min, y_max);
        let cols = multiple_columns(levels.len());
        let rows = levels.len().div_ceil(cols);
        let (area_left, area_right) = (40.0, w - 20.0);
        let (area_top, area_bottom) = (y + 10.0, h - 70.0);
        let cell_w = (area_right - area_left) / cols as f64;
        let cell_h = (area_bottom - area_top) / rows as f64;
        require_room(area_top, area_top + cell_h, size)?;
        let axis = TimeAxis::from_periods(
            t.periods
                .iter()
                .map(|p| (p.start, p.end, p.label.as_str(), p.state)),
        );
        let mut panels = Vec::with_capacity(levels.len());
        let mut below = area_bottom;
        for (gi, level) in levels.iter().enumerate() {
            let (row, col) = (gi / cols, gi % cols);
            let left = area_left + col as f64 * cell_w + 64.0;
            let top = area_top + row as f64 * cell_h + 22.0;
            let panel = Panel {
                name: "group",
                left,
                top,
                right: area_left + (col + 1) as f64 * cell_w - 12.0,
                bottom: area_top + (row + 1) as f64 * cell_h - 30.0,
                x_min,
                x_max,
                y_min,
                y_max,
            };
            axis.draw_background(c, &panel)?;
            y_axis(c, &panel, &format_number, true)?;
            draw_ref_lines(c, &panel, &inside, false)?;
            draw_events(c, &panel, &t.events, panel.top, false)?;
            let color = Palette::group(0);
            let mut line: Vec<(f64, f64)> = Vec::new();
            for p in &t.periods {
                let Some(g) = p.groups.iter().find(|g| &g.level == level) else {
                    c.polyline(&line, color, 1, None)?;
                    line.clear();
                    continue;
                };
                let px = panel.x_px((time_to_x(p.start) + time_to_x(p.end)) / 2.0);
                line.push((px, panel.y_px(g.mean)));
                if let (Some(lo), Some(hi)) = (g.ci_low, g.ci_high) {
                    c.interval_bar(px, panel.y_px(lo), panel.y_px(hi), color)?;
                }
            }
            c.polyline(&line, color, 1, None)?;
            for &(px, py) in &line {
                c.marker(Marker::group(0), (px, py), 3.0, color)?;
            }
            c.text(
                level,
                (panel.left, panel.top - 16.0),
                TextOpts::new(sizes::NOTE).color(Palette::BLACK),
            )?;
            frame(c, &panel)?;
            // Time labels under the bottom panel of each column.
            if row == rows - 1 || gi + cols >= levels.len() {
                below = axis.draw_labels(c, &panel)?;
            }
            panels.push(panel);
        }
        if let Some(last) = panels.last() {
            axis.draw_title(c, last, below)?;
        }
        c.value_axis_title(&t.characteristic, &t.unit, area_top, area_bottom)?;
        Ok(Layout {
            width: size.width,
            height: size.height,
            panels,
        })
    }
}

/// Levels in order of first appearance.
pub(super) fn levels_in_order<'a>(names: impl IntoIterator<Item = &'a str>) -> Vec<String> {
    let mut out: Vec<String> = Vec::new();
    for n in names {
        if !out.iter().any(|o| o == n) {
            out.push(n.to_string());
        }
    }
    out
}

/// x range of a run of periods plus events.
pub(super) fn time_range(
    periods: impl IntoIterator<Item = (chrono::DateTime<chrono::Utc>, chrono::DateTime<chrono::Utc>)>,
    events: &[super::EventMarker],
) -> (f64, f64) {
    let mut lo = f64::INFINITY;
    let mut hi = f64::NEG_INFINITY;
    for (s, e) in periods {
        lo = lo.min(time_to_x(s));
        hi = hi.max(time_to_x(e));
    }
    for e in events {
        lo = lo.min(time_to_x(e.at));
        hi = hi.max(time_to_x(e.at));
    }
    if hi <= lo {
        hi = lo + 1.0;
    }
    let pad = (hi - lo) * 0.01;
    (lo - pad, hi + pad)
}

impl Drawable for Trend<'_> {
    fn name(&self) -> String {
        format!("trend of {} by {}", self.0.characteristic, self.0.factor)
    }

    fn validate(&self) -> Result<(), String> {
        let t = self.0;
        if t.periods.is_empty() {
            return Err("no periods to draw".into());
        }
        for p in &t.periods {
            if p.end <= p.start {
                return Err(format!("period {} ends before it starts", p.label));
            }
            for g in &p.groups {
                check_finite(
                    [("mean", g.mean)]
                        .into_iter()
                        .chain(g.ci_low.map(|v| ("interval low", v)))
                        .chain(g.ci_high.map(|v| ("interval high", v))),
                )
                .map_err(|e| format!("period {}, group {}: {e}", p.label, g.level))?;
            }
        }
        if !t.periods.iter().any(|p| !p.groups.is_empty()) {
            return Err("no group has a value in any period".into());
        }
        Ok(())
    }

    fn draw<DB: DrawingBackend>(&self, c: &Canvas<DB>, size: Size) -> DrawResult<Layout> {
        let t = self.0;
        let (w, h) = (size.width as f64, size.height as f64);
        let levels = levels_in_order(
            t.periods
                .iter()
                .flat_map(|p| p.groups.iter().map(|g| g.level.as_str())),
        );

        let highlight = t
            .highlight
            .as_deref()
            .filter(|h| levels.iter().any(|l| l == h));
        if highlight.is_none() && levels.len() > CROWDED_GROUPS {
            return self.draw_small_multiples(c, size, &levels);
        }
        let mut legend: Vec<(Swatch, String)> = match highlight {
            Some(h) => vec![
                (
                    Swatch::Series {
                        color: Palette::group(1),
                        marker: Marker::group(1),
                        dash: None,
                        line: true,
                    },
                    format!("{h} (stands out)"),
                ),
                (
                    Swatch::Series {
                        color: MUTED,
                        marker: Marker::group(0),
                        dash: None,
                        line: true,
                    },
                    format!("the other {} groups", levels.len() - 1),
                ),
            ],
            None => levels
                .iter()
                .enumerate()
                .map(|(i, l)| {
                    (
                        Swatch::Series {
                            color: Palette::group(i),
                            marker: Marker::group(i),
                            dash: group_dash(i),
                            line: true,
                        },
                        l.clone(),
                    )
                })
                .collect(),
        };
        legend.extend(limit_legend(&t.limits));
        legend.extend(flag_event_legend(
            t.periods.iter().map(|p| p.state),
            !t.events.is_empty(),
        ));
        let first = &t.periods[0].label;
        let last = &t.periods[t.periods.len() - 1].label;
        let title = format!("{} by {}", t.characteristic, t.factor);
        let subtitle = format!(
            "Group mean per period with 95% interval, {} .. {}",
            first, last
        );
        let (strip_top, y) =
            header_with_event_strip(c, w, &title, &subtitle, &legend, !t.events.is_empty())?;

        let (x_min, x_max) = time_range(t.periods.iter().map(|p| (p.start, p.end)), &t.events);
        // The value axis fits the data: a 0.009 g shift stays visible against a 2 g tolerance;
        // limits beyond it are named at the panel's edge.
        let values = t
            .periods
            .iter()
            .flat_map(|p| p.groups.iter())
            .flat_map(|g| [Some(g.mean), g.ci_low, g.ci_high])
            .flatten();
        let (y_min, y_max) = padded_range(values).ok_or("no finite value to draw")?;
        let (inside, outside) = split_ref_lines(limit_lines(&t.limits, 5), y_min, y_max);
        let panel = Panel {
            name: "trend",
            left: 120.0,
            top: y + 6.0,
            right: w - 140.0,
            bottom: h - 92.0,
            x_min,
            x_max,
            y_min,
            y_max,
        };
        require_room(panel.top, panel.bottom, size)?;

        let axis = TimeAxis::from_periods(
            t.periods
                .iter()
                .map(|p| (p.start, p.end, p.label.as_str(), p.state)),
        );
        axis.draw_background(c, &panel)?;
        y_axis(c, &panel, &format_number, true)?;
        draw_ref_lines(c, &panel, &inside, true)?;
        draw_outside_limits(c, &panel, &outside)?;
        draw_events(c, &panel, &t.events, strip_top, true)?;

        // Series: dodge the groups sideways within each period so the intervals stay apart.
        let n_levels = levels.len() as f64;
        // With a highlight, the muted groups first and the highlighted one last (on top).
        let mut order: Vec<usize> = (0..levels.len()).collect();
        if let Some(h) = highlight {
            order.sort_by_key(|&i| levels[i] == h);
        }
        for gi in order {
            let level = &levels[gi];
            let is_muted = highlight.is_some_and(|h| h != level);
            let is_highlit = highlight.is_some_and(|h| h == level);
            let (color, width, dash, marker, marker_size) = if is_muted {
                (MUTED, 1, None, Marker::group(0), 3.5)
            } else if is_highlit {
                (Palette::group(1), 3, None, Marker::group(1), 7.0)
            } else {
                (
                    Palette::group(gi),
                    2,
                    group_dash(gi),
                    Marker::group(gi),
                    6.0,
                )
            };
            let mut line: Vec<(f64, f64)> = Vec::new();
            let mut points = Vec::new();
            for p in &t.periods {
                let Some(g) = p.groups.iter().find(|g| &g.level == level) else {
                    // A gap in the data breaks the connecting line.
                    c.polyline(&line, color, width, dash)?;
                    line.clear();
                    continue;
                };
                let (s, e) = (time_to_x(p.start), time_to_x(p.end));
                let slot = (e - s) * 0.6 / n_levels;
                let x = (s + e) / 2.0 + (gi as f64 - (n_levels - 1.0) / 2.0) * slot;
                let px = panel.x_px(x);
                line.push((px, panel.y_px(g.mean)));
                points.push((px, g));
            }
            c.polyline(&line, color, width, dash)?;
            for (px, g) in points {
                if let (Some(lo), Some(hi), false) = (g.ci_low, g.ci_high, is_muted) {
                    c.interval_bar(px, panel.y_px(lo), panel.y_px(hi), color)?;
                }
                c.marker(marker, (px, panel.y_px(g.mean)), marker_size, color)?;
            }
        }
        frame(c, &panel)?;
        let below = axis.draw_labels(c, &panel)?;

        // Axis titles.
        c.value_axis_title(&t.characteristic, &t.unit, panel.top, panel.bottom)?;
        axis.draw_title(c, &panel, below)?;
        Ok(Layout {
            width: size.width,
            height: size.height,
            panels: vec![panel],
        })
    }
}
