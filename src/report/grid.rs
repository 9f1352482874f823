//! The month overview grid: one row per characteristic x factor, one column per day, each cell
//! showing the flag state by colour *and* by symbol (diamond, triangle, dot, hatching, empty), so
//! it reads in greyscale too.

use chrono::Datelike;
use plotters::prelude::DrawingBackend;
use plotters::style::RGBColor;

use super::draw::{
    draw_cell, header, sizes, Align, Canvas, DrawResult, Drawable, Swatch, TextOpts, INK,
};
use super::{FlagState, GridInput, Layout, Panel, Size};

pub(super) struct Grid<'a>(pub &'a GridInput);

const CELL: f64 = 26.0;
const HEADER: f64 = 200.0;

/// A size at which every cell of `input` is about 26 x 26 pixels and every row label fits.
pub fn natural_size(input: &GridInput) -> Size {
    let longest = input
        .rows
        .iter()
        .map(|r| r.characteristic.chars().count() + r.factor.chars().count() + 3)
        .max()
        .unwrap_or(10);
    let label_w = (longest as f64 * 10.5 + 30.0).clamp(140.0, 460.0);
    let width = (label_w + input.days.len() as f64 * CELL + 60.0).max(900.0);
    let height = HEADER + 40.0 + input.rows.len() as f64 * CELL + 40.0;
    Size::new(width.round() as u32, height.round() as u32)
}

impl Drawable for Grid<'_> {
    fn name(&self) -> String {
        format!("month grid {}", self.0.title)
    }

    fn validate(&self) -> Result<(), String> {
        let g = self.0;
        if g.days.is_empty() {
            return Err("no days to draw".into());
        }
        if g.rows.is_empty() {
            return Err("no rows to draw".into());
        }
        for r in &g.rows {
            if r.cells.len() != g.days.len() {
                return Err(format!(
                    "row {} x {} has {} cells for {} days",
                    r.characteristic,
                    r.factor,
                    r.cells.len(),
                    g.days.len()
                ));
            }
        }
        Ok(())
    }

    fn draw<DB: DrawingBackend>(&self, c: &Canvas<DB>, size: Size) -> DrawResult<Layout> {
        let g = self.0;
        let (w, h) = (size.width as f64, size.height as f64);
        let legend: Vec<(Swatch, String)> = FlagState::ALL
            .iter()
            .map(|s| (Swatch::Cell { state: *s }, s.label().to_string()))
            .collect();
        let subtitle = format!(
            "Outcome of each daily check, one row per characteristic x factor ({} rows, {} days)",
            g.rows.len(),
            g.days.len()
        );
        let y = header(
            c,
            w,
            &format!("Month overview {}", g.title),
            &subtitle,
            &legend,
        )?;

        let label_opts = TextOpts::new(sizes::TICK).middle();
        let labels: Vec<String> = g
            .rows
            .iter()
            .map(|r| format!("{} · {}", r.characteristic, r.factor))
            .collect();
        let max_label = (w * 0.4).max(120.0);
        let mut label_w: f64 = 0.0;
        for l in &labels {
            label_w = label_w.max(c.text_width(l, label_opts)?.min(max_label));
        }
        let left = 24.0 + label_w + 12.0;
        let top = y + 62.0;
        let cell_w = ((w - left - 24.0) / g.days.len() as f64).min(40.0);
        let cell_h = ((h - top - 20.0) / g.rows.len() as f64).min(40.0);
        if cell_w < 4.0 || cell_h < 4.0 {
            return Err(format!(
                "{}x{} pixels are too small for {} rows x {} days; use the natural size",
                size.width,
                size.height,
                g.rows.len(),
                g.days.len()
            ));
        }
        let panel = Panel {
            name: "grid",
            left,
            top,
            right: left + cell_w * g.days.len() as f64,
            bottom: top + cell_h * g.rows.len() as f64,
            x_min: 0.0,
            x_max: g.days.len() as f64,
            y_min: g.rows.len() as f64,
            y_max: 0.0,
        };
        // Day numbers above the columns (every other one when cells are narrow), month at
        // the first day and wherever the month changes.
        let every = if cell_w < 22.0 { 2 } else { 1 };
        let mut last_month = None;
        for (i, d) in g.days.iter().enumerate() {
            let cx = panel.x_px(i as f64 + 0.5);
            if last_month != Some((d.year(), d.month())) {
                last_month = Some((d.year(), d.month()));
                c.text(
                    &d.format("%Y-%m").to_string(),
                    (panel.x_px(i as f64), top - 44.0),
                    TextOpts::new(sizes::NOTE).bold(),
                )?;
            }
            if i % every == 0 {
                c.text(
                    &d.day().to_string(),
                    (cx, top - 12.0),
                    TextOpts::new(sizes::NOTE).align(Align::Center).middle(),
                )?;
            }
        }
        let gap = 1.5;
        let side = (cell_w.min(cell_h) - 2.0 * gap).max(2.0);
        for (ri, (row, label)) in g.rows.iter().zip(&labels).enumerate() {
            let ty = panel.y_px(ri as f64);
            if ri % 2 == 1 {
                c.fill_rect(
                    (20.0, ty),
                    (panel.right + 4.0, ty + cell_h),
                    RGBColor(244, 244, 244),
                    1.0,
                )?;
            }
            let shown = c.fit_text(label, label_opts, max_label)?;
            c.text(
                &shown,
                (left - 12.0, ty + cell_h / 2.0),
                label_opts.align(Align::Right),
            )?;
            for (di, state) in row.cells.iter().enumerate() {
                let x0 = panel.x_px(di as f64) + (cell_w - side) / 2.0;
                let y0 = ty + (cell_h - side) / 2.0;
                draw_cell(c, *state, (x0, y0), side)?;
            }
        }
        c.stroke_rect((panel.left, panel.top), (panel.right, panel.bottom), INK, 1)?;
        Ok(Layout {
            width: size.width,
            height: size.height,
            panels: vec![panel],
        })
    }
}
