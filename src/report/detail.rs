//! The period detail chart: every value per group as jittered dots, each group's mean and 95%
//! interval, the grand mean and the spec limits; beside it a normal Q-Q plot of the ANOVA
//! residuals with a reference line through the quartiles.

use plotters::prelude::DrawingBackend;
use plotters::style::RGBColor;
use statrs::distribution::{ContinuousCDF, Normal};

use super::draw::{
    check_finite, draw_ref_lines, format_number, frame, header, limit_legend, limit_lines,
    padded_range, require_room, sizes, unit_suffix, y_axis, Align, Canvas, DrawResult, Drawable,
    Marker, Palette, RefLine, Swatch, TextOpts, INK,
};
use super::{DetailInput, Layout, Panel, Size};

pub(super) struct Detail<'a>(pub &'a DetailInput);

const GRAND: RGBColor = RGBColor(90, 90, 90);
const GRAND_DASH: super::draw::Dash = Some((18, 5));

/// Blom (1958) plotting positions `(i - 3/8) / (n + 1/4)` turned into standard normal
/// quantiles, for sorted residuals `i = 1..n`.
pub fn normal_scores(n: usize) -> Vec<f64> {
    let normal = Normal::standard();
    (1..=n)
        .map(|i| normal.inverse_cdf((i as f64 - 0.375) / (n as f64 + 0.25)))
        .collect()
}

/// Quantile by linear interpolation between order statistics (Hyndman and Fan 1996, type 7).
fn quantile(sorted: &[f64], p: f64) -> f64 {
    let h = (sorted.len() - 1) as f64 * p;
    let lo = h.floor() as usize;
    let hi = h.ceil() as usize;
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

/// Deterministic jitter in [-1, 1] from a fixed RNG state (a 64-bit linear congruential
/// generator, Knuth MMIX constants), so the same input always gives the same picture.
struct Jitter(u64);

impl Jitter {
    fn next(&mut self) -> f64 {
        self.0 = self
            .0
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        ((self.0 >> 11) as f64 / (1u64 << 53) as f64) * 2.0 - 1.0
    }
}

impl Drawable for Detail<'_> {
    fn name(&self) -> String {
        format!(
            "detail of {} by {} in {}",
            self.0.characteristic, self.0.factor, self.0.period_label
        )
    }

    fn validate(&self) -> Result<(), String> {
        let d = self.0;
        if d.groups.is_empty() {
            return Err("no groups to draw".into());
        }
        check_finite([("grand mean", d.grand_mean)])?;
        for g in &d.groups {
            check_finite(
                g.values
                    .iter()
                    .map(|v| ("value", *v))
                    .chain([("mean", g.mean)])
                    .chain(g.ci_low.map(|v| ("interval low", v)))
                    .chain(g.ci_high.map(|v| ("interval high", v))),
            )
            .map_err(|e| format!("group {}: {e}", g.level))?;
        }
        check_finite(d.residuals.iter().map(|v| ("residual", *v)))?;
        Ok(())
    }

    fn draw<DB: DrawingBackend>(&self, c: &Canvas<DB>, size: Size) -> DrawResult<Layout> {
        let d = self.0;
        let (w, h) = (size.width as f64, size.height as f64);
        let mut legend = vec![
            (
                Swatch::Series {
                    color: INK,
                    marker: Marker::Ring,
                    dash: None,
                    line: false,
                },
                "value".to_string(),
            ),
            (
                Swatch::Series {
                    color: INK,
                    marker: Marker::Square,
                    dash: None,
                    line: false,
                },
                "group mean, 95% interval".to_string(),
            ),
            (
                Swatch::Line {
                    color: GRAND,
                    dash: GRAND_DASH,
                    width: 2,
                },
                "grand mean".to_string(),
            ),
        ];
        legend.extend(limit_legend(&d.limits));
        legend.push((
            Swatch::Line {
                color: Palette::VERMILLION,
                dash: Some((12, 6)),
                width: 2,
            },
            "Q-Q line through the quartiles".to_string(),
        ));
        let title = format!("{} by {}, {}", d.characteristic, d.factor, d.period_label);
        let n_values: usize = d.groups.iter().map(|g| g.values.len()).sum();
        let subtitle = format!(
            "Every value per group ({n_values} values, {} groups) and normal Q-Q plot of the residuals",
            d.groups.len()
        );
        let y = header(c, w, &title, &subtitle, &legend)?;
        let top = y + 34.0;
        let bottom = h - 92.0;
        require_room(top, bottom, size)?;
        let split = (w * 0.6).round();
        let all_values = d
            .groups
            .iter()
            .flat_map(|g| {
                g.values
                    .iter()
                    .copied()
                    .chain([Some(g.mean), g.ci_low, g.ci_high].into_iter().flatten())
            })
            .chain(
                [
                    Some(d.grand_mean),
                    d.limits.lsl,
                    d.limits.usl,
                    d.limits.target,
                ]
                .into_iter()
                .flatten(),
            );
        let (y_min, y_max) = padded_range(all_values).ok_or("no finite value to draw")?;
        let k = d.groups.len() as f64;
        let left_panel = Panel {
            name: "values",
            left: 120.0,
            top,
            right: split - 140.0,
            bottom,
            x_min: -0.5,
            x_max: k - 0.5,
            y_min,
            y_max,
        };
        y_axis(c, &left_panel, &format_number, true)?;
        let mut refs = limit_lines(&d.limits, 5);
        refs.push(RefLine {
            value: d.grand_mean,
            label: format!("mean {}", super::draw::format_sig(d.grand_mean, 5)),
            color: GRAND,
            dash: GRAND_DASH,
        });
        draw_ref_lines(c, &left_panel, &refs, true)?;
        let mut jitter = Jitter(0x00c4_a2f1_0b37);
        let slot = (left_panel.x_px(1.0) - left_panel.x_px(0.0)).abs();
        let dot_r = if n_values > 600 { 3.0 } else { 4.5 };
        for (gi, g) in d.groups.iter().enumerate() {
            let color = Palette::group(gi);
            let cx = left_panel.x_px(gi as f64);
            for v in &g.values {
                let x = cx - slot * 0.12 + jitter.next() * slot * 0.14;
                c.circle(
                    (x, left_panel.y_px(*v)),
                    dot_r,
                    RGBColor(255, 255, 255),
                    true,
                    1,
                )?;
                c.circle((x, left_panel.y_px(*v)), dot_r, color, false, 2)?;
            }
            let mx = cx + slot * 0.2;
            if let (Some(lo), Some(hi)) = (g.ci_low, g.ci_high) {
                let (ylo, yhi) = (left_panel.y_px(lo), left_panel.y_px(hi));
                c.line((mx, ylo), (mx, yhi), color, 4, None)?;
                c.line((mx - 9.0, ylo), (mx + 9.0, ylo), color, 3, None)?;
                c.line((mx - 9.0, yhi), (mx + 9.0, yhi), color, 3, None)?;
            }
            c.marker(Marker::Square, (mx, left_panel.y_px(g.mean)), 7.0, color)?;
            let label = c.fit_text(&g.level, TextOpts::new(sizes::TICK), (slot - 8.0).max(30.0))?;
            c.text(
                &label,
                (cx, bottom + 10.0),
                TextOpts::new(sizes::TICK).align(Align::Center),
            )?;
            c.text(
                &format!("n = {}", g.values.len()),
                (cx, bottom + 34.0),
                TextOpts::new(sizes::NOTE).align(Align::Center),
            )?;
        }
        frame(c, &left_panel)?;
        let unit = unit_suffix(&d.unit);
        c.value_axis_title(&d.characteristic, &d.unit, top, bottom)?;
        c.text(
            &d.factor,
            ((left_panel.left + left_panel.right) / 2.0, bottom + 60.0),
            TextOpts::new(sizes::AXIS).align(Align::Center),
        )?;

        // Normal Q-Q plot of the residuals.
        let mut sorted: Vec<f64> = d.residuals.clone();
        sorted.sort_by(f64::total_cmp);
        let right_left = split + 80.0;
        let mut panels = vec![left_panel];
        if sorted.len() < 3 {
            c.text(
                "too few residuals for a Q-Q plot",
                ((right_left + w - 30.0) / 2.0, (top + bottom) / 2.0),
                TextOpts::new(sizes::AXIS).align(Align::Center).middle(),
            )?;
        } else {
            let z = normal_scores(sorted.len());
            let (x_min, x_max) = padded_range(z.iter().copied()).ok_or("no residuals")?;
            let (ry_min, ry_max) =
                padded_range(sorted.iter().copied()).ok_or("no finite residual")?;
            let qq = Panel {
                name: "normal Q-Q",
                left: right_left,
                top,
                right: w - 30.0,
                bottom,
                x_min,
                x_max,
                y_min: ry_min,
                y_max: ry_max,
            };
            y_axis(c, &qq, &format_number, true)?;
            let (xt, xstep) = super::draw::nice_ticks(qq.x_min, qq.x_max, 5);
            for t in xt {
                let x = qq.x_px(t);
                c.line((x, qq.top), (x, qq.bottom), super::draw::GRID, 1, None)?;
                c.line((x, qq.bottom), (x, qq.bottom + 6.0), INK, 2, None)?;
                c.text(
                    &format_number(t, xstep),
                    (x, qq.bottom + 10.0),
                    TextOpts::new(sizes::TICK).align(Align::Center),
                )?;
            }
            // Reference line through the first and third quartiles (common practice).
            let (q1, q3) = (quantile(&sorted, 0.25), quantile(&sorted, 0.75));
            let normal = Normal::standard();
            let (z1, z3) = (normal.inverse_cdf(0.25), normal.inverse_cdf(0.75));
            let slope = (q3 - q1) / (z3 - z1);
            let at = |zz: f64| q1 + slope * (zz - z1);
            // Clip the line to the panel's y range.
            let mut seg = Vec::new();
            for zz in [qq.x_min, qq.x_max] {
                seg.push((qq.x_px(zz), qq.y_px(at(zz).clamp(qq.y_min, qq.y_max))));
            }
            if slope != 0.0 {
                let za = z1 + (qq.y_min - q1) / slope;
                let zb = z1 + (qq.y_max - q1) / slope;
                let (lo, hi) = (za.min(zb).max(qq.x_min), za.max(zb).min(qq.x_max));
                seg = vec![
                    (qq.x_px(lo), qq.y_px(at(lo))),
                    (qq.x_px(hi), qq.y_px(at(hi))),
                ];
            }
            c.line(seg[0], seg[1], Palette::VERMILLION, 2, Some((12, 6)))?;
            for (zz, r) in z.iter().zip(&sorted) {
                c.marker(
                    Marker::Circle,
                    (qq.x_px(*zz), qq.y_px(*r)),
                    4.0,
                    Palette::BLUE,
                )?;
            }
            frame(c, &qq)?;
            c.text(
                "Normal Q-Q of residuals",
                (qq.left, top - 28.0),
                TextOpts::new(sizes::NOTE).bold(),
            )?;
            c.text(
                "standard normal quantile",
                ((qq.left + qq.right) / 2.0, bottom + 40.0),
                TextOpts::new(sizes::AXIS).align(Align::Center),
            )?;
            c.text(
                &format!("residual{unit}"),
                (split - 10.0, (top + bottom) / 2.0),
                TextOpts::new(sizes::AXIS)
                    .vertical()
                    .align(Align::Center)
                    .middle(),
            )?;
            panels.push(qq);
        }
        Ok(Layout {
            width: size.width,
            height: size.height,
            panels,
        })
    }
}
