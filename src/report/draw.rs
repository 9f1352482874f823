//! The drawing kit shared by every chart: font registration, palette, a pixel-space canvas over
//! any plotters backend, axis ticks, markers, the header (title, subtitle, legend) and the
//! render plumbing that turns a chart into SVG text or PNG bytes.

use std::sync::Once;

use chrono::{DateTime, TimeZone, Utc};
use plotters::coord::Shift;
use plotters::element::DashedPathElement;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};
use plotters::style::FontTransform;

use super::{Chart, FlagState, Format, Layout, Panel, Size};
use crate::error::{Error, Result};

/// Font family name under which the embedded DejaVu Sans is registered with plotters.
pub const FONT: &str = "DejaVu Sans";

static FONT_REGULAR: &[u8] = include_bytes!("../../assets/fonts/DejaVuSans.ttf");
static FONT_BOLD: &[u8] = include_bytes!("../../assets/fonts/DejaVuSans-Bold.ttf");
static REGISTER: Once = Once::new();

fn register_fonts() {
    REGISTER.call_once(|| {
        // Both files are part of the repository, so a failure here is a build defect; it would
        // show up as a chart error ("font unavailable") on the first text drawn.
        let _ = plotters::style::register_font(FONT, FontStyle::Normal, FONT_REGULAR);
        let _ = plotters::style::register_font(FONT, FontStyle::Bold, FONT_BOLD);
    });
}

/// The Okabe and Ito (2008) "Color Universal Design" colours, used everywhere in samewise charts.
pub struct Palette;

impl Palette {
    /// Black.
    pub const BLACK: RGBColor = RGBColor(0, 0, 0);
    /// Orange.
    pub const ORANGE: RGBColor = RGBColor(230, 159, 0);
    /// Sky blue.
    pub const SKY_BLUE: RGBColor = RGBColor(86, 180, 233);
    /// Bluish green.
    pub const BLUISH_GREEN: RGBColor = RGBColor(0, 158, 115);
    /// Yellow (only for fills, never for text or thin lines on white).
    pub const YELLOW: RGBColor = RGBColor(240, 228, 66);
    /// Blue.
    pub const BLUE: RGBColor = RGBColor(0, 114, 178);
    /// Vermillion.
    pub const VERMILLION: RGBColor = RGBColor(213, 94, 0);
    /// Reddish purple.
    pub const REDDISH_PURPLE: RGBColor = RGBColor(204, 121, 167);

    /// Colours of the groups, in order (yellow left out: too light for lines on white).
    pub const GROUPS: [RGBColor; 7] = [
        Palette::BLUE,
        Palette::VERMILLION,
        Palette::BLUISH_GREEN,
        Palette::REDDISH_PURPLE,
        Palette::ORANGE,
        Palette::SKY_BLUE,
        Palette::BLACK,
    ];

    /// Colour of group `idx`.
    pub fn group(idx: usize) -> RGBColor {
        Palette::GROUPS[idx % Palette::GROUPS.len()]
    }
}

/// Dark grey for axes and text that is not black.
pub const INK: RGBColor = RGBColor(40, 40, 40);
/// Light grey for grid lines.
pub const GRID: RGBColor = RGBColor(225, 225, 225);

/// Marker shapes; group `idx` gets shape `idx % 8` (7 colours x 8 shapes never repeat a pair
/// below 56 groups).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Marker {
    /// Filled circle.
    Circle,
    /// Filled square.
    Square,
    /// Filled triangle pointing up.
    TriangleUp,
    /// Filled diamond.
    Diamond,
    /// Filled triangle pointing down.
    TriangleDown,
    /// Open circle.
    Ring,
    /// Open square.
    OpenSquare,
    /// Diagonal cross.
    Cross,
}

impl Marker {
    /// The marker of group `idx`.
    pub fn group(idx: usize) -> Marker {
        const ALL: [Marker; 8] = [
            Marker::Circle,
            Marker::Square,
            Marker::TriangleUp,
            Marker::Diamond,
            Marker::TriangleDown,
            Marker::Ring,
            Marker::OpenSquare,
            Marker::Cross,
        ];
        ALL[idx % ALL.len()]
    }
}

/// A line dash pattern: `None` solid, `Some((dash, gap))` in pixels.
pub type Dash = Option<(u32, u32)>;

/// The dash of group `idx`'s connecting line.
pub fn group_dash(idx: usize) -> Dash {
    const ALL: [Dash; 5] = [
        None,
        Some((14, 6)),
        Some((5, 5)),
        Some((22, 6)),
        Some((9, 4)),
    ];
    ALL[idx % ALL.len()]
}

/// Days since 1970-01-01 UTC, the x coordinate of every time chart.
pub fn time_to_x(t: DateTime<Utc>) -> f64 {
    t.timestamp_millis() as f64 / 86_400_000.0
}

/// `" (mm)"` for a unit, nothing without one.
pub fn unit_suffix(unit: &str) -> String {
    if unit.is_empty() {
        String::new()
    } else {
        format!(" ({unit})")
    }
}

/// Refuses a chart whose plotting area, from `top` to `bottom` pixels, is too short to read.
pub fn require_room(top: f64, bottom: f64, size: Size) -> DrawResult {
    if bottom - top < 80.0 {
        return Err(format!(
            "{}x{} pixels leave no room for the plot; make the chart taller",
            size.width, size.height
        ));
    }
    Ok(())
}

/// The instant of a time-chart x coordinate (to the millisecond).
pub fn x_to_time(x: f64) -> DateTime<Utc> {
    let ms = (x * 86_400_000.0).round() as i64;
    Utc.timestamp_millis_opt(ms)
        .single()
        .unwrap_or(DateTime::<Utc>::UNIX_EPOCH)
}

/// Horizontal anchor of a text.
#[derive(Debug, Clone, Copy)]
pub enum Align {
    /// Text starts at x.
    Left,
    /// Text is centred on x.
    Center,
    /// Text ends at x.
    Right,
}

/// Text options.
#[derive(Debug, Clone, Copy)]
pub struct TextOpts {
    /// Font size in plotters units (pixel height of the em box times 1.24).
    pub size: f64,
    /// Bold face.
    pub bold: bool,
    /// Colour.
    pub color: RGBColor,
    /// Horizontal anchor.
    pub align: Align,
    /// Vertical anchor: `true` centres on y, `false` puts the top at y.
    pub middle: bool,
    /// Rotate by 270 degrees (reads bottom to top).
    pub vertical: bool,
}

impl TextOpts {
    /// Plain text of `size`, top-left anchored.
    pub fn new(size: f64) -> TextOpts {
        TextOpts {
            size,
            bold: false,
            color: INK,
            align: Align::Left,
            middle: false,
            vertical: false,
        }
    }
    /// Bold.
    pub fn bold(mut self) -> TextOpts {
        self.bold = true;
        self
    }
    /// Colour.
    pub fn color(mut self, color: RGBColor) -> TextOpts {
        self.color = color;
        self
    }
    /// Anchor.
    pub fn align(mut self, align: Align) -> TextOpts {
        self.align = align;
        self
    }
    /// Centre vertically on y.
    pub fn middle(mut self) -> TextOpts {
        self.middle = true;
        self
    }
    /// Rotated to read bottom to top.
    pub fn vertical(mut self) -> TextOpts {
        self.vertical = true;
        self
    }
}

/// Font sizes (plotters units) chosen for a projector at 1280 px width and for print.
pub mod sizes {
    /// Chart title.
    pub const TITLE: f64 = 30.0;
    /// Subtitle line.
    pub const SUBTITLE: f64 = 20.0;
    /// Axis titles.
    pub const AXIS: f64 = 21.0;
    /// Tick labels.
    pub const TICK: f64 = 19.0;
    /// Legend entries.
    pub const LEGEND: f64 = 19.0;
    /// Labels on reference lines and events.
    pub const NOTE: f64 = 18.0;
}

/// A pixel-space canvas over a plotters drawing area. Errors become strings, turned into
/// [`Error::Chart`] by [`render`].
pub struct Canvas<'a, DB: DrawingBackend> {
    area: &'a DrawingArea<DB, Shift>,
}

/// Result of a drawing step.
pub type DrawResult<T = ()> = std::result::Result<T, String>;

fn de<E: std::fmt::Display>(e: E) -> String {
    e.to_string()
}

fn px(v: f64) -> i32 {
    v.round() as i32
}

impl<'a, DB: DrawingBackend> Canvas<'a, DB> {
    /// Wraps a drawing area.
    pub fn new(area: &'a DrawingArea<DB, Shift>) -> Self {
        Canvas { area }
    }

    /// A straight line, solid or dashed.
    pub fn line(
        &self,
        from: (f64, f64),
        to: (f64, f64),
        color: RGBColor,
        width: u32,
        dash: Dash,
    ) -> DrawResult {
        self.polyline(&[from, to], color, width, dash)
    }

    /// A polyline, solid or dashed.
    pub fn polyline(
        &self,
        points: &[(f64, f64)],
        color: RGBColor,
        width: u32,
        dash: Dash,
    ) -> DrawResult {
        if points.len() < 2 {
            return Ok(());
        }
        let pts: Vec<(i32, i32)> = points.iter().map(|&(x, y)| (px(x), px(y))).collect();
        let style = color.stroke_width(width);
        match dash {
            None => self.area.draw(&PathElement::new(pts, style)).map_err(de),
            Some((d, g)) => self
                .area
                .draw(&DashedPathElement::new(pts, d, g, style))
                .map_err(de),
        }
    }

    /// A rectangle between two corners, filled with `color` at opacity `alpha`.
    pub fn fill_rect(
        &self,
        a: (f64, f64),
        b: (f64, f64),
        color: RGBColor,
        alpha: f64,
    ) -> DrawResult {
        let style = color.mix(alpha).filled();
        self.area
            .draw(&Rectangle::new(
                [(px(a.0), px(a.1)), (px(b.0), px(b.1))],
                style,
            ))
            .map_err(de)
    }

    /// A rectangle outline.
    pub fn stroke_rect(
        &self,
        a: (f64, f64),
        b: (f64, f64),
        color: RGBColor,
        width: u32,
    ) -> DrawResult {
        let style = color.stroke_width(width);
        self.area
            .draw(&Rectangle::new(
                [(px(a.0), px(a.1)), (px(b.0), px(b.1))],
                style,
            ))
            .map_err(de)
    }

    /// A filled polygon.
    pub fn polygon(&self, points: &[(f64, f64)], color: RGBColor, alpha: f64) -> DrawResult {
        let pts: Vec<(i32, i32)> = points.iter().map(|&(x, y)| (px(x), px(y))).collect();
        self.area
            .draw(&Polygon::new(pts, color.mix(alpha).filled()))
            .map_err(de)
    }

    /// A circle, filled or as an outline of `width`.
    pub fn circle(
        &self,
        c: (f64, f64),
        r: f64,
        color: RGBColor,
        filled: bool,
        width: u32,
    ) -> DrawResult {
        let style = if filled {
            color.filled()
        } else {
            color.stroke_width(width)
        };
        self.area
            .draw(&Circle::new((px(c.0), px(c.1)), px(r).max(1) as u32, style))
            .map_err(de)
    }

    /// A marker centred at `c` with "radius" `r`.
    pub fn marker(&self, marker: Marker, c: (f64, f64), r: f64, color: RGBColor) -> DrawResult {
        let (x, y) = c;
        match marker {
            Marker::Circle => self.circle(c, r, color, true, 1),
            Marker::Ring => {
                self.circle(c, r, RGBColor(255, 255, 255), true, 1)?;
                self.circle(c, r, color, false, 3)
            }
            Marker::Square => {
                let h = r * 0.9;
                self.fill_rect((x - h, y - h), (x + h, y + h), color, 1.0)
            }
            Marker::OpenSquare => {
                let h = r * 0.85;
                self.fill_rect((x - h, y - h), (x + h, y + h), RGBColor(255, 255, 255), 1.0)?;
                self.stroke_rect((x - h, y - h), (x + h, y + h), color, 3)
            }
            Marker::TriangleUp => {
                let h = r * 1.2;
                self.polygon(
                    &[(x, y - h), (x + h, y + h * 0.75), (x - h, y + h * 0.75)],
                    color,
                    1.0,
                )
            }
            Marker::TriangleDown => {
                let h = r * 1.2;
                self.polygon(
                    &[(x, y + h), (x + h, y - h * 0.75), (x - h, y - h * 0.75)],
                    color,
                    1.0,
                )
            }
            Marker::Diamond => {
                let h = r * 1.25;
                self.polygon(
                    &[(x, y - h), (x + h, y), (x, y + h), (x - h, y)],
                    color,
                    1.0,
                )
            }
            Marker::Cross => {
                let h = r * 0.9;
                self.line((x - h, y - h), (x + h, y + h), color, 3, None)?;
                self.line((x - h, y + h), (x + h, y - h), color, 3, None)
            }
        }
    }

    fn style(&self, opts: TextOpts) -> TextStyle<'static> {
        let face = if opts.bold {
            FontStyle::Bold
        } else {
            FontStyle::Normal
        };
        let h = match opts.align {
            Align::Left => HPos::Left,
            Align::Center => HPos::Center,
            Align::Right => HPos::Right,
        };
        let v = if opts.middle { VPos::Center } else { VPos::Top };
        let mut font = FontDesc::new(FontFamily::Name(FONT), opts.size, face);
        if opts.vertical {
            font = font.transform(FontTransform::Rotate270);
        }
        font.color(&opts.color).pos(Pos::new(h, v))
    }

    /// Text at a pixel position.
    pub fn text(&self, s: &str, at: (f64, f64), opts: TextOpts) -> DrawResult {
        if s.is_empty() {
            return Ok(());
        }
        let style = self.style(opts);
        self.area
            .draw(&Text::new(s.to_string(), (px(at.0), px(at.1)), style))
            .map_err(de)
    }

    /// Width in pixels of a text.
    pub fn text_width(&self, s: &str, opts: TextOpts) -> DrawResult<f64> {
        if s.is_empty() {
            return Ok(0.0);
        }
        let mut o = opts;
        o.vertical = false;
        let style = self.style(o);
        let (w, _) = self.area.estimate_text_size(s, &style).map_err(de)?;
        Ok(w as f64)
    }

    /// The vertical title of a value axis at the chart's left edge: the characteristic with its
    /// unit, shortened to fit the height from `top` to `bottom`.
    pub fn value_axis_title(
        &self,
        characteristic: &str,
        unit: &str,
        top: f64,
        bottom: f64,
    ) -> DrawResult {
        let title = self.fit_text(
            &format!("{characteristic}{}", unit_suffix(unit)),
            TextOpts::new(sizes::AXIS),
            bottom - top,
        )?;
        self.text(
            &title,
            (22.0, (top + bottom) / 2.0),
            TextOpts::new(sizes::AXIS)
                .vertical()
                .align(Align::Center)
                .middle(),
        )
    }

    /// A vertical interval at `x` from `y_low` to `y_high` (pixels), with 10-pixel caps.
    pub fn interval_bar(&self, x: f64, y_low: f64, y_high: f64, color: RGBColor) -> DrawResult {
        self.line((x, y_low), (x, y_high), color, 2, None)?;
        self.line((x - 5.0, y_low), (x + 5.0, y_low), color, 2, None)?;
        self.line((x - 5.0, y_high), (x + 5.0, y_high), color, 2, None)
    }

    /// Text shortened with "..." until it fits in `max_width`.
    pub fn fit_text(&self, s: &str, opts: TextOpts, max_width: f64) -> DrawResult<String> {
        if self.text_width(s, opts)? <= max_width {
            return Ok(s.to_string());
        }
        let chars: Vec<char> = s.chars().collect();
        let mut keep = chars.len();
        while keep > 1 {
            keep -= 1;
            let candidate: String = chars[..keep].iter().collect::<String>() + "…";
            if self.text_width(&candidate, opts)? <= max_width {
                return Ok(candidate);
            }
        }
        Ok("…".to_string())
    }
}

/// A chart that can draw itself on any backend.
pub trait Drawable {
    /// Chart name for error messages.
    fn name(&self) -> String;
    /// Checks the input before anything is drawn.
    fn validate(&self) -> std::result::Result<(), String>;
    /// Draws on `area` (already filled white) of `size` and returns the layout.
    fn draw<DB: DrawingBackend>(&self, canvas: &Canvas<DB>, size: Size) -> DrawResult<Layout>;
}

/// Renders a chart in the format asked for.
pub fn render<C: Drawable>(chart: &C, format: Format, size: Size) -> Result<Chart> {
    register_fonts();
    let fail = |reason: String| Error::Chart {
        chart: chart.name(),
        reason,
    };
    chart.validate().map_err(fail)?;
    if size.width < 200 || size.height < 150 || size.width > 20_000 || size.height > 60_000 {
        return Err(fail(format!(
            "size {}x{} is outside 200x150 .. 20000x60000 pixels",
            size.width, size.height
        )));
    }
    match format {
        Format::Svg => {
            let mut text = String::new();
            let layout = {
                let root = SVGBackend::with_string(&mut text, (size.width, size.height))
                    .into_drawing_area();
                root.fill(&WHITE).map_err(de).map_err(fail)?;
                let layout = chart.draw(&Canvas::new(&root), size).map_err(fail)?;
                root.present().map_err(de).map_err(fail)?;
                layout
            };
            Ok(Chart {
                bytes: compact_svg(&text).into_bytes(),
                layout,
            })
        }
        Format::Png => {
            let (w, h) = (size.width as usize, size.height as usize);
            let mut buffer = vec![255u8; w * h * 3];
            let layout = {
                let root = BitMapBackend::with_buffer(&mut buffer, (size.width, size.height))
                    .into_drawing_area();
                root.fill(&WHITE).map_err(de).map_err(fail)?;
                let layout = chart.draw(&Canvas::new(&root), size).map_err(fail)?;
                root.present().map_err(de).map_err(fail)?;
                layout
            };
            let mut bytes = Vec::new();
            {
                let mut encoder = png::Encoder::new(&mut bytes, size.width, size.height);
                encoder.set_color(png::ColorType::Rgb);
                encoder.set_depth(png::BitDepth::Eight);
                let mut writer = encoder.write_header().map_err(de).map_err(fail)?;
                writer.write_image_data(&buffer).map_err(de).map_err(fail)?;
            }
            Ok(Chart { bytes, layout })
        }
    }
}

/// The SVG without attributes that only restate SVG's defaults (`opacity="1"`, a stroke width
/// of 1 on a shape without a stroke): a chart of 32 groups over a month holds about a thousand
/// markers, and the month report embeds several.
fn compact_svg(text: &str) -> String {
    text.replace(" opacity=\"1\"", "")
        .replace(" stroke=\"none\" stroke-width=\"1\"", " stroke=\"none\"")
}

/// Nice tick positions covering `[lo, hi]` with about `target` steps (1, 2, 2.5 or 5 times a
/// power of ten; common practice for axis ticks).
pub fn nice_ticks(lo: f64, hi: f64, target: usize) -> (Vec<f64>, f64) {
    let span = (hi - lo).abs().max(f64::MIN_POSITIVE);
    let raw = span / target.max(1) as f64;
    let mag = 10f64.powf(raw.log10().floor());
    let step = [1.0, 2.0, 2.5, 5.0, 10.0]
        .iter()
        .map(|m| m * mag)
        .find(|s| *s >= raw)
        .unwrap_or(10.0 * mag);
    let first = (lo / step).ceil() as i64;
    let last = (hi / step).floor() as i64;
    let ticks = (first..=last).map(|i| i as f64 * step).collect();
    (ticks, step)
}

/// Decimals needed to print ticks of `step` without noise.
pub fn decimals_for(step: f64) -> usize {
    if step <= 0.0 || !step.is_finite() {
        return 2;
    }
    let mut d = 0usize;
    let mut s = step;
    while d < 9 && (s - s.round()).abs() > 1e-9 * s.abs().max(1.0) {
        s *= 10.0;
        d += 1;
    }
    d
}

/// A value range padded by 6% on each side, never empty.
pub fn padded_range(values: impl IntoIterator<Item = f64>) -> Option<(f64, f64)> {
    let mut lo = f64::INFINITY;
    let mut hi = f64::NEG_INFINITY;
    for v in values.into_iter().filter(|v| v.is_finite()) {
        lo = lo.min(v);
        hi = hi.max(v);
    }
    if !lo.is_finite() {
        return None;
    }
    let span = hi - lo;
    let pad = if span > 0.0 {
        span * 0.06
    } else if lo != 0.0 {
        lo.abs() * 0.01
    } else {
        1.0
    };
    Some((lo - pad, hi + pad))
}

/// Draws the frame, horizontal grid lines and y tick labels of a panel; returns the tick step.
pub fn y_axis<DB: DrawingBackend>(
    c: &Canvas<DB>,
    p: &Panel,
    format_tick: &dyn Fn(f64, f64) -> String,
    with_labels: bool,
) -> DrawResult<f64> {
    let n = (((p.bottom - p.top) / 55.0).round() as usize).clamp(2, 9);
    let (ticks, step) = nice_ticks(p.y_min, p.y_max, n);
    for t in &ticks {
        let y = p.y_px(*t);
        c.line((p.left, y), (p.right, y), GRID, 1, None)?;
        c.line((p.left - 6.0, y), (p.left, y), INK, 2, None)?;
        if with_labels {
            c.text(
                &format_tick(*t, step),
                (p.left - 10.0, y),
                TextOpts::new(sizes::TICK).align(Align::Right).middle(),
            )?;
        }
    }
    Ok(step)
}

/// Draws the panel frame (after the content, so it sits on top).
pub fn frame<DB: DrawingBackend>(c: &Canvas<DB>, p: &Panel) -> DrawResult {
    c.stroke_rect((p.left, p.top), (p.right, p.bottom), INK, 2)
}

/// Plain number formatting for ticks: as many decimals as the step needs.
pub fn format_number(v: f64, step: f64) -> String {
    let d = decimals_for(step);
    let s = format!("{:.*}", d, v);
    if s.starts_with('-') && s[1..].chars().all(|ch| ch == '0' || ch == '.') {
        s[1..].to_string()
    } else {
        s
    }
}

/// A value printed with `digits` significant digits but never in exponent form.
pub fn format_sig(v: f64, digits: usize) -> String {
    if v == 0.0 || !v.is_finite() {
        return format!("{v}");
    }
    let mag = v.abs().log10().floor() as i64;
    let decimals = (digits as i64 - 1 - mag).clamp(0, 10) as usize;
    format!("{:.*}", decimals, v)
}

/// One legend entry.
#[derive(Debug, Clone)]
pub enum Swatch {
    /// A data series: marker plus a line sample.
    Series {
        /// Colour.
        color: RGBColor,
        /// Marker.
        marker: Marker,
        /// Line dash (None = no line sample, marker only... or solid: see `line`).
        dash: Dash,
        /// Draw a line sample.
        line: bool,
    },
    /// A reference line.
    Line {
        /// Colour.
        color: RGBColor,
        /// Dash.
        dash: Dash,
        /// Width.
        width: u32,
    },
    /// A shaded band with an axis mark.
    Flag {
        /// The flag state shown.
        state: super::FlagState,
    },
    /// A grid cell.
    Cell {
        /// The state shown.
        state: super::FlagState,
    },
}

/// Draws a legend swatch in a 34 x 22 box whose left-middle point is `at`.
pub fn draw_swatch<DB: DrawingBackend>(c: &Canvas<DB>, s: &Swatch, at: (f64, f64)) -> DrawResult {
    let (x, y) = at;
    match s {
        Swatch::Series {
            color,
            marker,
            dash,
            line,
        } => {
            if *line {
                c.line((x, y), (x + 34.0, y), *color, 3, *dash)?;
            }
            c.marker(*marker, (x + 17.0, y), 6.0, *color)
        }
        Swatch::Line { color, dash, width } => c.line((x, y), (x + 34.0, y), *color, *width, *dash),
        Swatch::Flag { state } => {
            let (color, alpha) = flag_band(*state);
            c.fill_rect((x, y - 11.0), (x + 34.0, y + 11.0), color, alpha)?;
            flag_mark(c, *state, (x + 17.0, y + 2.0))
        }
        Swatch::Cell { state } => draw_cell(c, *state, (x + 4.0, y - 12.0), 24.0),
    }
}

/// Background tint of a flagged period.
pub fn flag_band(state: super::FlagState) -> (RGBColor, f64) {
    match state {
        super::FlagState::DiffersMaterial => (Palette::VERMILLION, 0.16),
        _ => (Palette::ORANGE, 0.16),
    }
}

/// The mark of a flagged period under the time axis: a filled triangle for "differs, material",
/// an open one for "differs". `at` is the triangle's centre.
pub fn flag_mark<DB: DrawingBackend>(
    c: &Canvas<DB>,
    state: super::FlagState,
    at: (f64, f64),
) -> DrawResult {
    let (x, y) = at;
    let h = 8.0;
    let tri = [(x, y - h), (x + h, y + h * 0.8), (x - h, y + h * 0.8)];
    match state {
        super::FlagState::DiffersMaterial => c.polygon(&tri, Palette::VERMILLION, 1.0),
        super::FlagState::Differs => {
            c.polygon(&tri, RGBColor(255, 255, 255), 1.0)?;
            c.polyline(
                &[tri[0], tri[1], tri[2], tri[0]],
                RGBColor(160, 100, 0),
                3,
                None,
            )
        }
        _ => Ok(()),
    }
}

/// [`header`] followed by the strip where the event labels go when there are events: returns
/// the top of that strip and the y below it, where the panel starts.
pub fn header_with_event_strip<DB: DrawingBackend>(
    c: &Canvas<DB>,
    width: f64,
    title: &str,
    subtitle: &str,
    legend: &[(Swatch, String)],
    has_events: bool,
) -> DrawResult<(f64, f64)> {
    let strip_top = header(c, width, title, subtitle, legend)?;
    let below = if has_events {
        strip_top + 52.0
    } else {
        strip_top
    };
    Ok((strip_top, below))
}

/// Title, subtitle and a wrapped legend across the top. Returns the y below the header.
pub fn header<DB: DrawingBackend>(
    c: &Canvas<DB>,
    width: f64,
    title: &str,
    subtitle: &str,
    legend: &[(Swatch, String)],
) -> DrawResult<f64> {
    let left = 24.0;
    let max_w = width - 2.0 * left;
    let t = TextOpts::new(sizes::TITLE).bold().color(Palette::BLACK);
    c.text(&c.fit_text(title, t, max_w)?, (left, 14.0), t)?;
    let mut y = 14.0 + sizes::TITLE + 4.0;
    if !subtitle.is_empty() {
        let s = TextOpts::new(sizes::SUBTITLE);
        c.text(&c.fit_text(subtitle, s, max_w)?, (left, y), s)?;
        y += sizes::SUBTITLE + 6.0;
    }
    if legend.is_empty() {
        return Ok(y + 4.0);
    }
    y += 12.0;
    let lt = TextOpts::new(sizes::LEGEND).middle();
    let mut x = left;
    for (swatch, label) in legend {
        let label = c.fit_text(label, lt, max_w - 50.0)?;
        let w = 34.0 + 8.0 + c.text_width(&label, lt)? + 26.0;
        if x > left && x + w > width - left {
            x = left;
            y += 30.0;
        }
        draw_swatch(c, swatch, (x, y))?;
        c.text(&label, (x + 42.0, y), lt)?;
        x += w;
    }
    Ok(y + 24.0)
}

/// Time-axis support shared by the trend, share and before/after charts.
pub struct TimeAxis {
    /// (x at the middle of the period, label, state) of each period.
    pub periods: Vec<(f64, f64, f64, String, super::FlagState)>,
}

impl TimeAxis {
    /// The axis of the given periods, each as (start, end, label, state).
    pub fn from_periods<'a>(
        periods: impl IntoIterator<Item = (DateTime<Utc>, DateTime<Utc>, &'a str, super::FlagState)>,
    ) -> TimeAxis {
        TimeAxis {
            periods: periods
                .into_iter()
                .map(|(start, end, label, state)| {
                    let (a, b) = (time_to_x(start), time_to_x(end));
                    (a, b, (a + b) / 2.0, label.to_string(), state)
                })
                .collect(),
        }
    }

    /// Draws flagged-period bands inside the panel, vertical grid lines at the labelled periods,
    /// tick labels (period labels, thinned to fit) and flag marks under the axis.
    pub fn draw_background<DB: DrawingBackend>(&self, c: &Canvas<DB>, p: &Panel) -> DrawResult {
        for (start, end, _, _, state) in &self.periods {
            if state.is_flag() {
                let (color, alpha) = flag_band(*state);
                c.fill_rect(
                    (p.x_px(*start).max(p.left), p.top),
                    (p.x_px(*end).min(p.right), p.bottom),
                    color,
                    alpha,
                )?;
            }
        }
        Ok(())
    }

    /// The title under the time axis, centred on the panel, at `below` (as [`Self::draw_labels`]
    /// returns it).
    pub fn draw_title<DB: DrawingBackend>(
        &self,
        c: &Canvas<DB>,
        p: &Panel,
        below: f64,
    ) -> DrawResult {
        c.text(
            "period (plant calendar)",
            ((p.left + p.right) / 2.0, below + 8.0),
            TextOpts::new(sizes::AXIS).align(Align::Center),
        )
    }

    /// Tick labels and flag marks below the axis. Returns the y below the labels.
    pub fn draw_labels<DB: DrawingBackend>(&self, c: &Canvas<DB>, p: &Panel) -> DrawResult<f64> {
        let opts = TextOpts::new(sizes::TICK).align(Align::Center);
        let widest = self
            .periods
            .iter()
            .map(|(_, _, _, l, _)| c.text_width(l, opts))
            .collect::<DrawResult<Vec<f64>>>()?
            .into_iter()
            .fold(0.0, f64::max);
        let spacing = if self.periods.len() > 1 {
            (p.x_px(self.periods[self.periods.len() - 1].2) - p.x_px(self.periods[0].2)).abs()
                / (self.periods.len() - 1) as f64
        } else {
            f64::INFINITY
        };
        let every = ((widest + 18.0) / spacing).ceil().max(1.0) as usize;
        let labelled = self.labelled(every);
        for (i, (_, _, mid, label, state)) in self.periods.iter().enumerate() {
            let x = p.x_px(*mid);
            if state.is_flag() {
                flag_mark(c, *state, (x, p.bottom + 14.0))?;
            }
            if labelled[i] {
                c.line((x, p.bottom), (x, p.bottom + 5.0), INK, 2, None)?;
                c.text(label, (x, p.bottom + 30.0), opts)?;
            }
        }
        Ok(p.bottom + 30.0 + sizes::TICK)
    }

    /// Which periods get a label when only every `every`-th fits: for production days
    /// (`YYYY-MM-DD` labels) the week starts (Mondays), every other Monday, or month starts,
    /// whichever is the densest that fits, so ticks fall on calendar boundaries; for other
    /// periods every `every`-th.
    fn labelled(&self, every: usize) -> Vec<bool> {
        let n = self.periods.len();
        if every <= 1 {
            return vec![true; n];
        }
        let days: Option<Vec<chrono::NaiveDate>> = self
            .periods
            .iter()
            .map(|(_, _, _, l, _)| chrono::NaiveDate::parse_from_str(l, "%Y-%m-%d").ok())
            .collect();
        let Some(days) = days else {
            return (0..n).map(|i| i % every == 0).collect();
        };
        use chrono::Datelike;
        let mondays = |step: i64| -> Vec<bool> {
            days.iter()
                .map(|d| {
                    d.weekday() == chrono::Weekday::Mon
                        && (d.num_days_from_ce() as i64 / 7) % step == 0
                })
                .collect()
        };
        let months: Vec<bool> = days.iter().map(|d| d.day() == 1).collect();
        // A choice fits when its labelled days are at least `every` periods apart, and it labels
        // at least three (else the plain thinning says more).
        let fits = |marks: &[bool]| {
            let at: Vec<usize> = (0..n).filter(|&i| marks[i]).collect();
            at.len() >= 3 && at.windows(2).all(|w| w[1] - w[0] >= every)
        };
        for marks in [mondays(1), mondays(2), months] {
            if fits(&marks) {
                return marks;
            }
        }
        (0..n).map(|i| i % every == 0).collect()
    }
}

/// Event lines across a panel and their labels in the strip above it (two staggered rows so
/// neighbouring labels do not overwrite each other).
pub fn draw_events<DB: DrawingBackend>(
    c: &Canvas<DB>,
    p: &Panel,
    events: &[super::EventMarker],
    strip_top: f64,
    with_labels: bool,
) -> DrawResult {
    let opts = TextOpts::new(sizes::NOTE).color(Palette::BLACK).middle();
    let mut row_end = [f64::NEG_INFINITY; 2];
    let mut sorted: Vec<&super::EventMarker> = events.iter().collect();
    sorted.sort_by_key(|e| e.at);
    for e in sorted {
        let x = p.x_px(time_to_x(e.at));
        if x < p.left - 0.5 || x > p.right + 0.5 {
            continue;
        }
        c.line((x, p.top), (x, p.bottom), Palette::BLACK, 2, EVENT_DASH)?;
        if with_labels {
            let label = c.fit_text(&e.label, opts, 600.0)?;
            let w = c.text_width(&label, opts)?;
            let row = if row_end[0] < x - 4.0 {
                0
            } else if row_end[1] < x - 4.0 {
                1
            } else {
                usize::from(row_end[1] < row_end[0])
            };
            let y = strip_top + 12.0 + row as f64 * 24.0;
            // Labels near the right edge grow leftwards so they stay inside the picture.
            let right_side = x + 12.0 + w <= p.right + 100.0;
            let (tx, align) = if right_side {
                (x + 10.0, Align::Left)
            } else {
                (x - 10.0, Align::Right)
            };
            c.line((x, y), (x, p.top), Palette::BLACK, 2, EVENT_DASH)?;
            c.polygon(
                &[(x - 6.0, y - 7.0), (x + 6.0, y - 7.0), (x, y + 3.0)],
                Palette::BLACK,
                1.0,
            )?;
            c.text(&label, (tx, y - 2.0), opts.align(align))?;
            row_end[row] = if right_side { tx + w } else { x };
        }
    }
    Ok(())
}

/// Horizontal reference lines (limits, target, grand mean) with a label at the right of the
/// panel.
pub struct RefLine {
    /// Value.
    pub value: f64,
    /// Label, e.g. "USL 12.050".
    pub label: String,
    /// Colour.
    pub color: RGBColor,
    /// Dash.
    pub dash: Dash,
}

/// Draws reference lines and their right-hand labels, nudging labels apart when close.
pub fn draw_ref_lines<DB: DrawingBackend>(
    c: &Canvas<DB>,
    p: &Panel,
    lines: &[RefLine],
    with_labels: bool,
) -> DrawResult {
    let mut placed: Vec<f64> = Vec::new();
    let mut order: Vec<&RefLine> = lines.iter().collect();
    order.sort_by(|a, b| b.value.total_cmp(&a.value));
    for l in order {
        let y = p.y_px(l.value);
        c.line((p.left, y), (p.right, y), l.color, 2, l.dash)?;
        if with_labels {
            let mut ly = y;
            while placed.iter().any(|q| (q - ly).abs() < 20.0) {
                ly += 4.0;
            }
            placed.push(ly);
            c.text(
                &l.label,
                (p.right + 8.0, ly),
                TextOpts::new(sizes::NOTE).color(l.color).middle(),
            )?;
        }
    }
    Ok(())
}

/// Event lines are solid (spec limits are dashed, the target dotted).
pub const EVENT_DASH: Dash = None;
/// Standard line colour and dash of the spec limits.
pub const LIMIT_DASH: Dash = Some((12, 6));
/// Dash of the target line.
pub const TARGET_DASH: Dash = Some((3, 5));
/// Colour of the target line.
pub const TARGET_COLOR: RGBColor = RGBColor(90, 90, 90);

/// Reference lines of spec limits and target, with labels, in the `unit`.
pub fn limit_lines(limits: &super::Limits, digits: usize) -> Vec<RefLine> {
    let mut out = Vec::new();
    if let Some(v) = limits.usl {
        out.push(RefLine {
            value: v,
            label: format!("USL {}", format_sig(v, digits)),
            color: Palette::BLACK,
            dash: LIMIT_DASH,
        });
    }
    if let Some(v) = limits.target {
        out.push(RefLine {
            value: v,
            label: format!("target {}", format_sig(v, digits)),
            color: TARGET_COLOR,
            dash: TARGET_DASH,
        });
    }
    if let Some(v) = limits.lsl {
        out.push(RefLine {
            value: v,
            label: format!("LSL {}", format_sig(v, digits)),
            color: Palette::BLACK,
            dash: LIMIT_DASH,
        });
    }
    out
}

/// Grey of the groups a highlighted chart mutes.
pub const MUTED: RGBColor = RGBColor(175, 175, 175);

/// The reference lines inside `[y_min, y_max]`, drawn as lines, and those outside, returned for
/// [`draw_outside_limits`] (a value axis that fits the data instead of the limits).
pub fn split_ref_lines(
    lines: Vec<RefLine>,
    y_min: f64,
    y_max: f64,
) -> (Vec<RefLine>, Vec<RefLine>) {
    lines
        .into_iter()
        .partition(|l| l.value >= y_min && l.value <= y_max)
}

/// Reference lines beyond the panel's value range: their label with an arrow at the top or
/// bottom edge, right of the panel ("USL 42.02 ↑ above").
pub fn draw_outside_limits<DB: DrawingBackend>(
    c: &Canvas<DB>,
    p: &Panel,
    lines: &[RefLine],
) -> DrawResult {
    let (mut above, mut below) = (0.0, 0.0);
    for l in lines {
        let (y, text) = if l.value > p.y_max {
            above += 20.0;
            (p.top + above - 10.0, format!("{} \u{2191}", l.label))
        } else {
            below += 20.0;
            (p.bottom - below + 10.0, format!("{} \u{2193}", l.label))
        };
        c.text(
            &text,
            (p.right + 8.0, y),
            TextOpts::new(sizes::NOTE).color(l.color).middle(),
        )?;
    }
    Ok(())
}

/// Legend entries of the limits present.
pub fn limit_legend(limits: &super::Limits) -> Vec<(Swatch, String)> {
    let mut out = Vec::new();
    if limits.lsl.is_some() || limits.usl.is_some() {
        out.push((
            Swatch::Line {
                color: Palette::BLACK,
                dash: LIMIT_DASH,
                width: 2,
            },
            "spec limits".to_string(),
        ));
    }
    if limits.target.is_some() {
        out.push((
            Swatch::Line {
                color: TARGET_COLOR,
                dash: TARGET_DASH,
                width: 2,
            },
            "target".to_string(),
        ));
    }
    out
}

/// Legend entries for flagged periods and events, when present.
pub fn flag_event_legend(
    states: impl IntoIterator<Item = super::FlagState>,
    has_events: bool,
) -> Vec<(Swatch, String)> {
    let states: Vec<super::FlagState> = states.into_iter().collect();
    let mut out = Vec::new();
    for s in [super::FlagState::DiffersMaterial, super::FlagState::Differs] {
        if states.contains(&s) {
            out.push((Swatch::Flag { state: s }, format!("flagged: {}", s.label())));
        }
    }
    if has_events {
        out.push((
            Swatch::Line {
                color: Palette::BLACK,
                dash: EVENT_DASH,
                width: 2,
            },
            "process change".to_string(),
        ));
    }
    out
}

/// Checks that every number in `values` is finite, naming the first that is not.
pub fn check_finite<'v>(
    values: impl IntoIterator<Item = (&'v str, f64)>,
) -> std::result::Result<(), String> {
    for (what, v) in values {
        if !v.is_finite() {
            return Err(format!("{what} is {v}, not a finite number"));
        }
    }
    Ok(())
}

/// Draws one cell with its top-left corner at `at` and side `side`.
pub(super) fn draw_cell<DB: DrawingBackend>(
    c: &Canvas<DB>,
    state: FlagState,
    at: (f64, f64),
    side: f64,
) -> DrawResult {
    let (x, y) = at;
    let (x1, y1) = (x + side, y + side);
    let (cx, cy) = (x + side / 2.0, y + side / 2.0);
    let r = side * 0.3;
    match state {
        FlagState::DiffersMaterial => {
            c.fill_rect((x, y), (x1, y1), Palette::VERMILLION, 1.0)?;
            c.polygon(
                &[(cx, cy - r), (cx + r, cy), (cx, cy + r), (cx - r, cy)],
                Palette::BLACK,
                1.0,
            )
        }
        FlagState::Differs => {
            c.fill_rect((x, y), (x1, y1), Palette::ORANGE, 1.0)?;
            c.polygon(
                &[(cx, cy - r), (cx + r, cy + r * 0.8), (cx - r, cy + r * 0.8)],
                Palette::BLACK,
                1.0,
            )
        }
        FlagState::NoEvidence => {
            c.fill_rect((x, y), (x1, y1), RGBColor(196, 232, 220), 1.0)?;
            c.circle(
                (cx, cy),
                (side * 0.1).max(1.5),
                RGBColor(0, 100, 72),
                true,
                1,
            )
        }
        FlagState::NotIndependent => {
            // The "differs" triangle, open, on a pale ground: a difference the data's
            // dependence does not let stand.
            c.fill_rect((x, y), (x1, y1), RGBColor(250, 236, 204), 1.0)?;
            let tri = [(cx, cy - r), (cx + r, cy + r * 0.8), (cx - r, cy + r * 0.8)];
            c.polyline(
                &[tri[0], tri[1], tri[2], tri[0]],
                RGBColor(120, 80, 0),
                2,
                None,
            )
        }
        FlagState::TooLittleData => {
            c.fill_rect((x, y), (x1, y1), RGBColor(222, 222, 222), 1.0)?;
            // Diagonal hatching.
            let steps = 3;
            for i in 1..=steps {
                let f = i as f64 / (steps as f64 + 1.0) * 2.0;
                let (a, b) = if f <= 1.0 {
                    ((x, y + side * f), (x + side * f, y))
                } else {
                    ((x + side * (f - 1.0), y1), (x1, y + side * (f - 1.0)))
                };
                c.line(a, b, RGBColor(110, 110, 110), 1, None)?;
            }
            Ok(())
        }
        FlagState::NotRun => {
            c.fill_rect((x, y), (x1, y1), RGBColor(255, 255, 255), 1.0)?;
            c.stroke_rect((x, y), (x1, y1), RGBColor(200, 200, 200), 1)
        }
    }
}
