//! The before/after chart of an investigation: one panel per group on shared axes, the group's
//! values (or period means) over the window, the event line, and the group's mean before and
//! after the event as horizontal segments (dashed before, solid after).

use plotters::prelude::DrawingBackend;

use super::draw::{
    check_finite, draw_events, draw_ref_lines, format_number, format_sig, frame, header,
    limit_legend, limit_lines, padded_range, sizes, time_to_x, x_to_time, y_axis, Align, Canvas,
    DrawResult, Drawable, Marker, Palette, Swatch, TextOpts, GRID, INK,
};
use super::{BeforeAfterInput, Layout, Panel, Size};

pub(super) struct BeforeAfter<'a>(pub &'a BeforeAfterInput);

/// `v` with a sign and one decimal more than `reference` shows with 5 significant digits.
fn signed_like(v: f64, reference: f64) -> String {
    let shown = format_sig(reference, 5);
    let decimals = shown.split('.').nth(1).map_or(0, str::len) + 1;
    format!("{:+.*}", decimals, v)
}

const BEFORE_DASH: super::draw::Dash = Some((6, 4));

/// Time ticks at round hours or days covering `[lo, hi]` (days since the epoch), about
/// `target` of them. Returns the ticks and the step in days.
fn time_ticks(lo: f64, hi: f64, target: usize) -> (Vec<f64>, f64) {
    const STEPS: [f64; 11] = [
        1.0 / 24.0,
        2.0 / 24.0,
        3.0 / 24.0,
        6.0 / 24.0,
        12.0 / 24.0,
        1.0,
        2.0,
        7.0,
        14.0,
        28.0,
        91.0,
    ];
    let raw = (hi - lo) / target.max(1) as f64;
    let step = STEPS.iter().copied().find(|s| *s >= raw).unwrap_or(182.0);
    let first = (lo / step).ceil() as i64;
    let last = (hi / step).floor() as i64;
    ((first..=last).map(|i| i as f64 * step).collect(), step)
}

impl Drawable for BeforeAfter<'_> {
    fn name(&self) -> String {
        format!(
            "before/after {} of {} by {}",
            self.0.event.label, self.0.characteristic, self.0.factor
        )
    }

    fn validate(&self) -> Result<(), String> {
        let b = self.0;
        if b.groups.is_empty() {
            return Err("no groups to draw".into());
        }
        if b.window_end <= b.window_start {
            return Err("the window ends before it starts".into());
        }
        if b.event.at < b.window_start || b.event.at > b.window_end {
            return Err(format!(
                "event {} at {} lies outside the window {} .. {}",
                b.event.label,
                b.event.at.format("%Y-%m-%d %H:%M"),
                b.window_start.format("%Y-%m-%d %H:%M"),
                b.window_end.format("%Y-%m-%d %H:%M")
            ));
        }
        for g in &b.groups {
            check_finite(
                g.points
                    .iter()
                    .map(|p| ("value", p.value))
                    .chain(g.mean_before.map(|v| ("mean before", v)))
                    .chain(g.mean_after.map(|v| ("mean after", v))),
            )
            .map_err(|e| format!("group {}: {e}", g.level))?;
        }
        Ok(())
    }

    fn draw<DB: DrawingBackend>(&self, c: &Canvas<DB>, size: Size) -> DrawResult<Layout> {
        let b = self.0;
        let (w, h) = (size.width as f64, size.height as f64);
        let mut legend = vec![
            (
                Swatch::Line {
                    color: Palette::BLACK,
                    dash: BEFORE_DASH,
                    width: 4,
                },
                "mean before".to_string(),
            ),
            (
                Swatch::Line {
                    color: Palette::BLACK,
                    dash: None,
                    width: 4,
                },
                "mean after".to_string(),
            ),
        ];
        legend.extend(limit_legend(&b.limits));
        legend.push((
            Swatch::Line {
                color: Palette::BLACK,
                dash: super::draw::EVENT_DASH,
                width: 2,
            },
            "process change".to_string(),
        ));
        let title = format!(
            "{} by {}: before and after {}",
            b.characteristic, b.factor, b.event.label
        );
        let limit_text: Vec<String> = [
            b.limits.lsl.map(|v| format!("LSL {}", format_sig(v, 5))),
            b.limits
                .target
                .map(|v| format!("target {}", format_sig(v, 5))),
            b.limits.usl.map(|v| format!("USL {}", format_sig(v, 5))),
        ]
        .into_iter()
        .flatten()
        .collect();
        let subtitle = format!(
            "Each {} per group, {} .. {}{}{}",
            b.point_kind,
            b.window_start
                .with_timezone(&b.time_zone)
                .format("%Y-%m-%d %H:%M"),
            b.window_end
                .with_timezone(&b.time_zone)
                .format("%Y-%m-%d %H:%M"),
            if limit_text.is_empty() { "" } else { "; " },
            limit_text.join(", ")
        );
        let y = header(c, w, &title, &subtitle, &legend)?;
        let strip_top = y;
        let top = y + 52.0;
        let bottom = h - 86.0;
        let k = b.groups.len() as f64;
        let gap = 16.0;
        let panel_h = (bottom - top - gap * (k - 1.0)) / k;
        if panel_h < 60.0 {
            return Err(format!(
                "{}x{} pixels leave less than 60 pixels per group; make the chart taller",
                size.width, size.height
            ));
        }
        let x_min = time_to_x(b.window_start);
        let x_max = time_to_x(b.window_end);
        let x_event = time_to_x(b.event.at);
        let values = b
            .groups
            .iter()
            .flat_map(|g| {
                g.points
                    .iter()
                    .map(|p| p.value)
                    .chain(g.mean_before)
                    .chain(g.mean_after)
            })
            .chain(
                [b.limits.lsl, b.limits.usl, b.limits.target]
                    .into_iter()
                    .flatten(),
            );
        let (y_min, y_max) = padded_range(values).ok_or("no finite value to draw")?;
        let (ticks, step) = time_ticks(x_min, x_max, 8);
        let fmt = if step < 1.0 {
            "%m-%d %H:%M"
        } else {
            "%Y-%m-%d"
        };
        let mut panels = Vec::new();
        for (gi, g) in b.groups.iter().enumerate() {
            let color = Palette::group(gi);
            let pt = top + gi as f64 * (panel_h + gap);
            let p = Panel {
                name: "group",
                left: 120.0,
                top: pt,
                right: w - 300.0,
                bottom: pt + panel_h,
                x_min,
                x_max,
                y_min,
                y_max,
            };
            y_axis(c, &p, &format_number, true)?;
            for t in &ticks {
                let x = p.x_px(*t);
                c.line((x, p.top), (x, p.bottom), GRID, 1, None)?;
            }
            // Limits are named in the subtitle; labels at the right would collide with the group notes.
            draw_ref_lines(c, &p, &limit_lines(&b.limits, 5), false)?;
            draw_events(c, &p, std::slice::from_ref(&b.event), strip_top, gi == 0)?;
            for pnt in &g.points {
                let x = time_to_x(pnt.at);
                if x < x_min || x > x_max {
                    continue;
                }
                c.marker(
                    Marker::group(gi),
                    (p.x_px(x), p.y_px(pnt.value)),
                    4.5,
                    color,
                )?;
            }
            if let Some(m) = g.mean_before {
                c.line(
                    (p.x_px(x_min), p.y_px(m)),
                    (p.x_px(x_event), p.y_px(m)),
                    Palette::BLACK,
                    4,
                    BEFORE_DASH,
                )?;
            }
            if let Some(m) = g.mean_after {
                c.line(
                    (p.x_px(x_event), p.y_px(m)),
                    (p.x_px(x_max), p.y_px(m)),
                    Palette::BLACK,
                    4,
                    None,
                )?;
            }
            frame(c, &p)?;
            // Group name and the shift, right of the panel.
            let name_opts = TextOpts::new(sizes::AXIS).bold().color(color);
            let shown = c.fit_text(&g.level, name_opts, 270.0)?;
            c.text(&shown, (p.right + 14.0, p.top + 4.0), name_opts)?;
            let fmt_mean = |m: Option<f64>| m.map_or("n/a".to_string(), |v| format_sig(v, 5));
            c.text(
                &format!("before {}", fmt_mean(g.mean_before)),
                (p.right + 14.0, p.top + 34.0),
                TextOpts::new(sizes::NOTE),
            )?;
            c.text(
                &format!("after {}", fmt_mean(g.mean_after)),
                (p.right + 14.0, p.top + 58.0),
                TextOpts::new(sizes::NOTE),
            )?;
            if let (Some(a), Some(bm)) = (g.mean_before, g.mean_after) {
                if p.bottom - p.top > 90.0 {
                    c.text(
                        &format!("shift {} {}", signed_like(bm - a, a), b.unit),
                        (p.right + 14.0, p.top + 82.0),
                        TextOpts::new(sizes::NOTE).bold(),
                    )?;
                }
            }
            panels.push(p);
        }
        let last = panels[panels.len() - 1];
        for t in &ticks {
            let x = last.x_px(*t);
            c.line((x, last.bottom), (x, last.bottom + 6.0), INK, 2, None)?;
            c.text(
                &x_to_time(*t)
                    .with_timezone(&b.time_zone)
                    .format(fmt)
                    .to_string(),
                (x, last.bottom + 10.0),
                TextOpts::new(sizes::TICK).align(Align::Center),
            )?;
        }
        c.text(
            &format!("time ({})", b.time_zone.name()),
            ((last.left + last.right) / 2.0, last.bottom + 42.0),
            TextOpts::new(sizes::AXIS).align(Align::Center),
        )?;
        c.value_axis_title(&b.characteristic, &b.unit, top, bottom)?;
        Ok(Layout {
            width: size.width,
            height: size.height,
            panels,
        })
    }
}

/// A size that gives every group's panel room (about 120 pixels each) at the default width.
pub fn before_after_natural_size(input: &BeforeAfterInput) -> Size {
    let k = input.groups.len().max(1) as u32;
    Size {
        width: Size::DEFAULT.width,
        height: Size::DEFAULT.height.max(340 + 120 * k),
    }
}
