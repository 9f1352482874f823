//! Charts (plotters, SVG or PNG) and the self-contained HTML monthly review report.
//!
//! Works on values handed to it; never opens the database. The engine fills the plain input
//! structs of [`input`] from the stored runs; this module turns them into pictures and HTML.
//!
//! Start reading at [`render_trend`] (the group trend chart) and [`render_month_report`]. Every
//! chart is drawn in pixel space by the small canvas in `draw.rs` on top of a plotters backend
//! (SVG text or an RGB bitmap encoded as PNG), so the same code makes both formats and the
//! mapping from data to pixels is known exactly: [`Chart::layout`] returns it, which is how the
//! tests check that an event marker sits at the right x.
//!
//! Look: a colour-blind-safe palette (Okabe and Ito 2008, "Color Universal Design"), and every
//! colour has a second cue (marker shape, line dash, cell symbol) so charts survive greyscale
//! printing. Text uses the DejaVu Sans font carried in `assets/fonts/` (Bitstream Vera licence,
//! see `assets/fonts/LICENSE-DejaVu.txt`), so PNG text renders on a machine with no fonts.

mod before_after;
mod detail;
mod draw;
mod grid;
mod html;
pub mod input;
mod share;
mod trend;

use std::path::Path;

pub use before_after::before_after_natural_size;
pub use draw::format_sig;
pub use draw::{time_to_x, x_to_time, Palette};
pub use grid::natural_size as grid_natural_size;
pub use html::{escape_html, render_month_report, standard_methods};
pub use input::*;

use crate::error::Result;

/// Output format of a chart.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Format {
    /// Scalable vector graphics (text stays text; the default).
    Svg,
    /// Portable network graphics (a bitmap).
    Png,
}

impl Format {
    /// The format a file name asks for (`.svg` or `.png`, any case); `None` otherwise.
    pub fn from_path(path: &Path) -> Option<Format> {
        let ext = path.extension()?.to_str()?.to_ascii_lowercase();
        match ext.as_str() {
            "svg" => Some(Format::Svg),
            "png" => Some(Format::Png),
            _ => None,
        }
    }
}

/// Chart size in pixels.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Size {
    /// Width in pixels.
    pub width: u32,
    /// Height in pixels.
    pub height: u32,
}

impl Size {
    /// The default size of the time charts: wide enough for a month of days on a projector.
    pub const DEFAULT: Size = Size {
        width: 1280,
        height: 680,
    };

    /// A size from width and height.
    pub fn new(width: u32, height: u32) -> Size {
        Size { width, height }
    }
}

/// Where one plotting panel sits in the picture and which data range it shows.
/// `x` of time charts is in days since 1970-01-01 UTC (see [`time_to_x`]).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Panel {
    /// Name of the panel ("trend", "values", "normal Q-Q", a group level...).
    pub name: &'static str,
    /// Left edge of the plotting area in pixels.
    pub left: f64,
    /// Top edge in pixels.
    pub top: f64,
    /// Right edge in pixels.
    pub right: f64,
    /// Bottom edge in pixels.
    pub bottom: f64,
    /// Data value at the left edge.
    pub x_min: f64,
    /// Data value at the right edge.
    pub x_max: f64,
    /// Data value at the bottom edge.
    pub y_min: f64,
    /// Data value at the top edge.
    pub y_max: f64,
}

impl Panel {
    /// Pixel x of a data x.
    pub fn x_px(&self, x: f64) -> f64 {
        self.left + (x - self.x_min) / (self.x_max - self.x_min) * (self.right - self.left)
    }

    /// Pixel y of a data y (pixel y grows downwards).
    pub fn y_px(&self, y: f64) -> f64 {
        self.bottom - (y - self.y_min) / (self.y_max - self.y_min) * (self.bottom - self.top)
    }

    /// Data x of a pixel x.
    pub fn x_value(&self, px: f64) -> f64 {
        self.x_min + (px - self.left) / (self.right - self.left) * (self.x_max - self.x_min)
    }

    /// Data y of a pixel y.
    pub fn y_value(&self, py: f64) -> f64 {
        self.y_min + (self.bottom - py) / (self.bottom - self.top) * (self.y_max - self.y_min)
    }
}

/// How a chart was laid out: its size and its panels.
#[derive(Debug, Clone, PartialEq)]
pub struct Layout {
    /// Picture width in pixels.
    pub width: u32,
    /// Picture height in pixels.
    pub height: u32,
    /// The plotting panels, in drawing order.
    pub panels: Vec<Panel>,
}

/// A rendered chart: the file bytes and the layout used.
#[derive(Debug, Clone)]
pub struct Chart {
    /// SVG text (UTF-8) or PNG bytes.
    pub bytes: Vec<u8>,
    /// Where the panels are and which ranges they show.
    pub layout: Layout,
}

/// Draws the group trend chart: each group's mean per period with its 95% interval, spec limits
/// and target as reference lines, events as labelled vertical lines, flagged periods shaded and
/// marked on the time axis.
pub fn draw_trend(input: &TrendInput, format: Format, size: Size) -> Result<Chart> {
    draw::render(&trend::Trend(input), format, size)
}

/// The size a trend chart needs: [`Size::DEFAULT`], or taller when its groups are drawn as
/// small multiples (more than 8 groups and none highlighted).
pub fn trend_size(input: &TrendInput) -> Size {
    trend::trend_size(input)
}

/// [`draw_trend`], bytes only.
pub fn render_trend(input: &TrendInput, format: Format, size: Size) -> Result<Vec<u8>> {
    draw_trend(input, format, size).map(|c| c.bytes)
}

/// Draws the between-group share of variance per period, with its interval, the material share
/// as a reference line, events, and flagged periods.
pub fn draw_share(input: &ShareInput, format: Format, size: Size) -> Result<Chart> {
    draw::render(&share::Share(input), format, size)
}

/// [`draw_share`], bytes only.
pub fn render_share(input: &ShareInput, format: Format, size: Size) -> Result<Vec<u8>> {
    draw_share(input, format, size).map(|c| c.bytes)
}

/// Draws the period detail: every value per group (jittered dots, fixed RNG state so the picture
/// is reproducible) with group mean and interval, grand mean and spec limits; beside it a normal
/// Q-Q plot of the residuals with a reference line through the quartiles.
pub fn draw_detail(input: &DetailInput, format: Format, size: Size) -> Result<Chart> {
    draw::render(&detail::Detail(input), format, size)
}

/// [`draw_detail`], bytes only.
pub fn render_detail(input: &DetailInput, format: Format, size: Size) -> Result<Vec<u8>> {
    draw_detail(input, format, size).map(|c| c.bytes)
}

/// Draws the month overview grid: one row per characteristic x factor, one column per day, each
/// cell coloured and marked with a symbol by its [`FlagState`]. Use [`grid_natural_size`] for a
/// size where every cell is readable.
pub fn draw_grid(input: &GridInput, format: Format, size: Size) -> Result<Chart> {
    draw::render(&grid::Grid(input), format, size)
}

/// [`draw_grid`], bytes only.
pub fn render_grid(input: &GridInput, format: Format, size: Size) -> Result<Vec<u8>> {
    draw_grid(input, format, size).map(|c| c.bytes)
}

/// Draws the before/after chart: one panel per group on shared axes, the event line in each, the
/// group's values (or period means) and its before and after means as horizontal segments.
pub fn draw_before_after(input: &BeforeAfterInput, format: Format, size: Size) -> Result<Chart> {
    draw::render(&before_after::BeforeAfter(input), format, size)
}

/// [`draw_before_after`], bytes only.
pub fn render_before_after(
    input: &BeforeAfterInput,
    format: Format,
    size: Size,
) -> Result<Vec<u8>> {
    draw_before_after(input, format, size).map(|c| c.bytes)
}

/// Writes chart bytes to `path` (through a temporary name: a failure leaves no half file).
pub fn write_chart(path: &Path, bytes: &[u8]) -> Result<()> {
    crate::output::write_atomic(path, bytes)
}
