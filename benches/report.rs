//! Speed of the monthly report (issue 6: under 10 s): render the HTML for 50 characteristics x
//! 5 factors x 30 daily periods of INVENTED inputs (tests/report_inputs), 4 groups per factor,
//! i.e. 250 trend + 250 share charts, the 250-row month grid and one before/after chart.
//!
//! Run: `cargo bench --bench report`.

#[path = "../tests/report_inputs/mod.rs"]
mod inputs;

use criterion::{criterion_group, criterion_main, Criterion};
use samewise::report::{render_month_report, render_trend, Format, Size};

fn month_report(c: &mut Criterion) {
    let factors = ["machine", "line", "cavity", "shift", "supplier"];
    let levels = ["M1", "M4", "M7", "M9"];
    let report = inputs::month_report("Invented Plant Nord", 50, &factors, &levels, 30);
    let bytes = render_month_report(&report).len();
    eprintln!("month report: {:.1} MB of HTML", bytes as f64 / 1e6);
    let mut group = c.benchmark_group("report");
    group.sample_size(10);
    group.bench_function("month_50x5x30", |b| {
        b.iter(|| render_month_report(std::hint::black_box(&report)))
    });
    let trend = &report.characteristics[0].factors[0].trend;
    group.bench_function("trend_svg_30_periods_4_groups", |b| {
        b.iter(|| render_trend(std::hint::black_box(trend), Format::Svg, Size::DEFAULT).unwrap())
    });
    group.bench_function("trend_png_30_periods_4_groups", |b| {
        b.iter(|| render_trend(std::hint::black_box(trend), Format::Png, Size::DEFAULT).unwrap())
    });
    group.finish();
}

criterion_group!(benches, month_report);
criterion_main!(benches);
