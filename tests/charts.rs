//! Chart content tests: build invented inputs (tests/report_inputs, all values INVENTED), render
//! SVG, parse it with roxmltree and check what matters.

#[path = "report_inputs/mod.rs"]
mod inputs;

use samewise::report::*;

const LEVELS: [&str; 4] = ["M1", "M4", "M7", "M9"];

#[test]
fn png_of_every_chart_renders_with_text() {
    let dir = inputs::artifact_dir("charts");
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
        ("grid", {
            let g = inputs::grid(8, &["machine", "supplier"], 30);
            draw_grid(&g, Format::Png, grid_natural_size(&g)).unwrap()
        }),
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
    }
}
