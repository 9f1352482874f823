//! A small reader of the SVG that plotters writes, shared by the chart and report tests:
//! shapes with their colours and points, and text labels with their positions.
#![allow(dead_code)]

use samewise::report::Panel;

// Okabe and Ito (2008) colours as plotters writes them.
pub const BLUE: &str = "#0072B2";
pub const VERMILLION: &str = "#D55E00";
pub const BLUISH_GREEN: &str = "#009E73";
pub const REDDISH_PURPLE: &str = "#CC79A7";
pub const BLACK: &str = "#000000";

#[derive(Debug, Clone)]
pub struct Shape {
    pub tag: String,
    pub fill: String,
    pub stroke: String,
    pub opacity: f64,
    /// Points (polyline, polygon), centre (circle) or corners (rect).
    pub points: Vec<(f64, f64)>,
}

#[derive(Debug, Clone)]
pub struct Label {
    pub text: String,
    pub x: f64,
    pub y: f64,
    pub anchor: String,
}

pub struct Svg {
    pub shapes: Vec<Shape>,
    pub texts: Vec<Label>,
    pub width: f64,
    pub height: f64,
}

pub fn num(node: roxmltree::Node, name: &str) -> f64 {
    node.attribute(name)
        .unwrap_or_else(|| panic!("{} lacks {name}", node.tag_name().name()))
        .parse()
        .unwrap()
}

pub fn parse_svg(bytes: &[u8]) -> Svg {
    let text = std::str::from_utf8(bytes).expect("SVG is UTF-8");
    let doc = roxmltree::Document::parse(text).expect("SVG parses as XML");
    let root = doc.root_element();
    assert_eq!(root.tag_name().name(), "svg");
    let mut shapes = Vec::new();
    let mut texts = Vec::new();
    for n in root.descendants().filter(|n| n.is_element()) {
        let tag = n.tag_name().name().to_string();
        let attr = |a: &str| n.attribute(a).unwrap_or("none").to_string();
        let opacity = n.attribute("opacity").map_or(1.0, |o| o.parse().unwrap());
        let points = |s: &str| -> Vec<(f64, f64)> {
            s.split_whitespace()
                .map(|p| {
                    let (x, y) = p.split_once(',').unwrap();
                    (x.parse().unwrap(), y.parse().unwrap())
                })
                .collect()
        };
        match tag.as_str() {
            "circle" => shapes.push(Shape {
                points: vec![(num(n, "cx"), num(n, "cy"))],
                fill: attr("fill"),
                stroke: attr("stroke"),
                opacity,
                tag,
            }),
            "rect" => {
                let (x, y) = (num(n, "x"), num(n, "y"));
                shapes.push(Shape {
                    points: vec![(x, y), (x + num(n, "width"), y + num(n, "height"))],
                    fill: attr("fill"),
                    stroke: attr("stroke"),
                    opacity,
                    tag,
                })
            }
            "polygon" | "polyline" => shapes.push(Shape {
                points: points(n.attribute("points").unwrap()),
                fill: attr("fill"),
                stroke: attr("stroke"),
                opacity,
                tag,
            }),
            "text" => texts.push(Label {
                text: n.text().unwrap_or("").trim().to_string(),
                x: num(n, "x"),
                y: num(n, "y"),
                anchor: attr("text-anchor"),
            }),
            "svg" => {}
            other => panic!("unexpected SVG element {other}"),
        }
    }
    Svg {
        shapes,
        texts,
        width: num(root, "width"),
        height: num(root, "height"),
    }
}

impl Svg {
    pub fn text(&self, s: &str) -> Vec<&Label> {
        self.texts.iter().filter(|t| t.text == s).collect()
    }
    pub fn has_text(&self, s: &str) -> bool {
        !self.text(s).is_empty()
    }
    pub fn inside<'a>(&'a self, p: &'a Panel) -> impl Iterator<Item = &'a Shape> + 'a {
        self.shapes.iter().filter(move |s| {
            let (x, y) = centre(s);
            x >= p.left - 1.0 && x <= p.right + 1.0 && y >= p.top - 1.0 && y <= p.bottom + 1.0
        })
    }
    /// The group markers inside the panel, counted by group: filled circles (blue, the first
    /// group), squares (vermillion, the second), triangles (bluish green, the third) and
    /// diamonds (reddish purple, the fourth).
    pub fn group_markers(&self, p: &Panel) -> [usize; 4] {
        let circles = self
            .inside(p)
            .filter(|s| s.tag == "circle" && s.fill == BLUE)
            .count();
        let squares = self
            .inside(p)
            .filter(|s| s.tag == "rect" && s.fill == VERMILLION && s.opacity == 1.0)
            .count();
        let triangles = self
            .inside(p)
            .filter(|s| s.tag == "polygon" && s.fill == BLUISH_GREEN && s.points.len() == 3)
            .count();
        let diamonds = self
            .inside(p)
            .filter(|s| s.tag == "polygon" && s.fill == REDDISH_PURPLE && s.points.len() == 4)
            .count();
        [circles, squares, triangles, diamonds]
    }
}

pub fn centre(s: &Shape) -> (f64, f64) {
    let n = s.points.len() as f64;
    let (sx, sy) = s
        .points
        .iter()
        .fold((0.0, 0.0), |(a, b), (x, y)| (a + x, b + y));
    (sx / n, sy / n)
}
