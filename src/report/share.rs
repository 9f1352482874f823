//! The between-group share chart: the variance-components share of the total variance per
//! period with its interval, so a rising share shows groups drifting apart before single periods
//! become significant.

use plotters::prelude::DrawingBackend;

use super::draw::{
    check_finite, draw_events, draw_ref_lines, flag_event_legend, format_number, frame,
    header_with_event_strip, require_room, sizes, time_to_x, y_axis, Align, Canvas, DrawResult,
    Drawable, Marker, Palette, RefLine, Swatch, TextOpts, TimeAxis, INK,
};
use super::trend::time_range;
use super::{Layout, Panel, ShareInput, Size};

pub(super) struct Share<'a>(pub &'a ShareInput);

const SERIES: plotters::style::RGBColor = Palette::BLUE;
const MISSING: plotters::style::RGBColor = plotters::style::RGBColor(110, 110, 110);

impl Drawable for Share<'_> {
    fn name(&self) -> String {
        format!(
            "between-group share of {} by {}",
            self.0.characteristic, self.0.factor
        )
    }

    fn validate(&self) -> Result<(), String> {
        let s = self.0;
        if s.periods.is_empty() {
            return Err("no periods to draw".into());
        }
        if !(s.confidence > 0.0 && s.confidence < 1.0) {
            return Err(format!(
                "confidence {} must lie strictly between 0 and 1",
                s.confidence
            ));
        }
        for p in &s.periods {
            if p.end <= p.start {
                return Err(format!("period {} ends before it starts", p.label));
            }
            let vals = [p.share, p.ci_low, p.ci_high];
            check_finite(vals.iter().flatten().map(|v| ("share", *v)))
                .map_err(|e| format!("period {}: {e}", p.label))?;
            if vals
                .iter()
                .flatten()
                .any(|v| !(-1e-9..=1.0 + 1e-9).contains(v))
            {
                return Err(format!(
                    "period {}: a share must lie in 0..1 (it is a fraction, not a percentage)",
                    p.label
                ));
            }
        }
        if let Some(m) = s.material_share {
            if !(0.0..=1.0).contains(&m) {
                return Err(format!("material share {m} must lie in 0..1"));
            }
        }
        Ok(())
    }

    fn draw<DB: DrawingBackend>(&self, c: &Canvas<DB>, size: Size) -> DrawResult<Layout> {
        let s = self.0;
        let (w, h) = (size.width as f64, size.height as f64);
        let any_missing = s.periods.iter().any(|p| p.share.is_none());
        let mut legend = vec![(
            Swatch::Series {
                color: SERIES,
                marker: Marker::Circle,
                dash: None,
                line: true,
            },
            if s.periods.iter().any(|p| p.ci_low.is_some()) {
                format!("between-group share, {:.0}% interval", s.confidence * 100.0)
            } else {
                // Nested designs give three-level components, without an interval of the share.
                "between-group share".to_string()
            },
        )];
        if s.material_share.is_some() {
            legend.push((
                Swatch::Line {
                    color: Palette::VERMILLION,
                    dash: Some((12, 6)),
                    width: 2,
                },
                "material share".to_string(),
            ));
        }
        if any_missing {
            legend.push((
                Swatch::Series {
                    color: MISSING,
                    marker: Marker::Cross,
                    dash: None,
                    line: false,
                },
                "no estimate (too little data)".to_string(),
            ));
        }
        legend.extend(flag_event_legend(
            s.periods.iter().map(|p| p.state),
            !s.events.is_empty(),
        ));
        let title = format!("{} by {}: between-group share", s.characteristic, s.factor);
        let subtitle = format!(
            "Share of the total variance that lies between the groups, {} .. {}",
            s.periods[0].label,
            s.periods[s.periods.len() - 1].label
        );
        let (strip_top, y) =
            header_with_event_strip(c, w, &title, &subtitle, &legend, !s.events.is_empty())?;
        let (x_min, x_max) = time_range(s.periods.iter().map(|p| (p.start, p.end)), &s.events);
        // The y axis runs from 0 % to a round value above the data and the material share.
        let top_value = s
            .periods
            .iter()
            .flat_map(|p| [p.share, p.ci_high])
            .flatten()
            .chain(s.material_share)
            .fold(0.0f64, f64::max);
        let y_max = (((top_value * 1.12) * 10.0).ceil() / 10.0).clamp(0.1, 1.0) * 100.0;
        let panel = Panel {
            name: "share",
            left: 120.0,
            top: y + 6.0,
            right: w - 160.0,
            bottom: h - 92.0,
            x_min,
            x_max,
            y_min: 0.0,
            y_max,
        };
        require_room(panel.top, panel.bottom, size)?;
        let axis = TimeAxis::from_periods(
            s.periods
                .iter()
                .map(|p| (p.start, p.end, p.label.as_str(), p.state)),
        );
        axis.draw_background(c, &panel)?;
        // As many decimals as the tick step needs (2.5 %, not "2%").
        y_axis(
            c,
            &panel,
            &|v, step| format!("{}%", format_number(v, step)),
            true,
        )?;
        if let Some(m) = s.material_share {
            draw_ref_lines(
                c,
                &panel,
                &[RefLine {
                    value: m * 100.0,
                    label: format!("material {:.0}%", m * 100.0),
                    color: Palette::VERMILLION,
                    dash: Some((12, 6)),
                }],
                true,
            )?;
        }
        draw_events(c, &panel, &s.events, strip_top, true)?;

        let mut line: Vec<(f64, f64)> = Vec::new();
        let mut points = Vec::new();
        for p in &s.periods {
            let x = panel.x_px((time_to_x(p.start) + time_to_x(p.end)) / 2.0);
            match p.share {
                Some(v) => {
                    line.push((x, panel.y_px(v * 100.0)));
                    points.push((x, p));
                }
                None => {
                    c.polyline(&line, SERIES, 3, None)?;
                    line.clear();
                    c.marker(Marker::Cross, (x, panel.bottom - 10.0), 6.0, MISSING)?;
                }
            }
        }
        c.polyline(&line, SERIES, 3, None)?;
        for (x, p) in points {
            if let (Some(lo), Some(hi)) = (p.ci_low, p.ci_high) {
                c.interval_bar(x, panel.y_px(lo * 100.0), panel.y_px(hi * 100.0), SERIES)?;
            }
            if let Some(v) = p.share {
                c.marker(Marker::Circle, (x, panel.y_px(v * 100.0)), 6.0, SERIES)?;
            }
        }
        frame(c, &panel)?;
        let below = axis.draw_labels(c, &panel)?;
        c.text(
            "between-group share of variance (%)",
            (22.0, (panel.top + panel.bottom) / 2.0),
            TextOpts::new(sizes::AXIS)
                .vertical()
                .align(Align::Center)
                .middle()
                .color(INK),
        )?;
        axis.draw_title(c, &panel, below)?;
        Ok(Layout {
            width: size.width,
            height: size.height,
            panels: vec![panel],
        })
    }
}
