//! Small self-contained SVG charts for the reports: a histogram with
//! vertical marker lines, and x–y series with horizontal marker lines.

use std::fmt::Write as _;

/// Escapes text for XML.
#[must_use]
pub fn xml(s: &str) -> String {
    s.replace('&', "&amp;").replace('<', "&lt;").replace('>', "&gt;").replace('"', "&quot;")
}

const W: f64 = 720.0;
const H: f64 = 360.0;
const PAD: f64 = 64.0;

fn frame(o: &mut String, title: &str, x_label: &str, y_label: &str) {
    let _ = write!(
        o,
        "<svg xmlns=\"http://www.w3.org/2000/svg\" viewBox=\"0 0 {W} {H}\" width=\"{W}\" height=\"{H}\" \
         font-family=\"sans-serif\" font-size=\"12\">\
         <rect width=\"100%\" height=\"100%\" fill=\"#ffffff\"/>\
         <text x=\"{}\" y=\"20\" text-anchor=\"middle\" font-size=\"14\">{}</text>\
         <text x=\"{}\" y=\"{}\" text-anchor=\"middle\">{}</text>\
         <text x=\"14\" y=\"{}\" text-anchor=\"middle\" transform=\"rotate(-90 14 {})\">{}</text>\
         <line x1=\"{PAD}\" y1=\"{}\" x2=\"{}\" y2=\"{}\" stroke=\"#333\"/>\
         <line x1=\"{PAD}\" y1=\"{PAD}\" x2=\"{PAD}\" y2=\"{}\" stroke=\"#333\"/>",
        W / 2.0,
        xml(title),
        W / 2.0,
        H - 8.0,
        xml(x_label),
        H / 2.0,
        H / 2.0,
        xml(y_label),
        H - PAD,
        W - PAD,
        H - PAD,
        H - PAD,
    );
}

fn ticks(o: &mut String, lo: f64, hi: f64, horizontal: bool, fmt: &dyn Fn(f64) -> String) {
    for i in 0..=4 {
        let v = lo + (hi - lo) * f64::from(i) / 4.0;
        if horizontal {
            let x = PAD + (W - 2.0 * PAD) * f64::from(i) / 4.0;
            let _ = write!(
                o,
                "<text x=\"{x:.1}\" y=\"{:.1}\" text-anchor=\"middle\">{}</text>",
                H - PAD + 16.0,
                xml(&fmt(v))
            );
        } else {
            let y = H - PAD - (H - 2.0 * PAD) * f64::from(i) / 4.0;
            let _ = write!(
                o,
                "<text x=\"{:.1}\" y=\"{:.1}\" text-anchor=\"end\">{}</text>",
                PAD - 4.0,
                y + 4.0,
                xml(&fmt(v))
            );
        }
    }
}

/// A histogram of `bins` (counts of equal-width bins from `lo` to `hi`),
/// with labelled vertical lines at `marks` (value, label, colour).
#[must_use]
pub fn histogram(
    bins: &[u64],
    lo: f64,
    hi: f64,
    marks: &[(f64, String, &str)],
    title: &str,
    x_label: &str,
    fmt: &dyn Fn(f64) -> String,
) -> String {
    let mut o = String::new();
    frame(&mut o, title, x_label, "count");
    let top = bins.iter().copied().max().unwrap_or(0).max(1) as f64;
    let span = if hi > lo { hi - lo } else { 1.0 };
    let bw = (W - 2.0 * PAD) / bins.len().max(1) as f64;
    for (i, &b) in bins.iter().enumerate() {
        let h = (H - 2.0 * PAD) * b as f64 / top;
        let _ = write!(
            o,
            "<rect x=\"{:.2}\" y=\"{:.2}\" width=\"{:.2}\" height=\"{h:.2}\" fill=\"#4a78a8\"/>",
            PAD + bw * i as f64,
            H - PAD - h,
            (bw - 0.5).max(0.5),
        );
    }
    ticks(&mut o, lo, hi, true, fmt);
    ticks(&mut o, 0.0, top, false, &|v| format!("{v:.0}"));
    // Labels alternate between two rows in left-to-right order, so neighbours do not overlap.
    let mut order: Vec<usize> = (0..marks.len()).collect();
    order.sort_by(|&a, &b| {
        marks.get(a).map(|m| m.0).unwrap_or(0.0).total_cmp(&marks.get(b).map(|m| m.0).unwrap_or(0.0))
    });
    for (k, (v, label, colour)) in order.iter().filter_map(|&i| marks.get(i)).enumerate() {
        let x = PAD + (W - 2.0 * PAD) * (v - lo) / span;
        if !(PAD - 1.0..=W - PAD + 1.0).contains(&x) {
            continue;
        }
        let _ = write!(
            o,
            "<line x1=\"{x:.2}\" y1=\"{PAD}\" x2=\"{x:.2}\" y2=\"{}\" stroke=\"{colour}\" stroke-dasharray=\"5,3\"/>\
             <text x=\"{x:.2}\" y=\"{}\" text-anchor=\"middle\" fill=\"{colour}\">{}</text>",
            H - PAD,
            PAD - 6.0 - 12.0 * (k % 2) as f64,
            xml(label)
        );
    }
    o.push_str("</svg>\n");
    o
}

/// One series of points.
#[derive(Debug, Clone)]
pub struct Series {
    /// Points (x, y).
    pub points: Vec<(f64, f64)>,
    /// Stroke colour.
    pub colour: String,
    /// Stroke width, px.
    pub width: f64,
    /// Drawn as dots instead of a line.
    pub dots: bool,
}

/// Series on shared axes, with labelled horizontal lines at `levels`.
#[must_use]
pub fn lines(
    series: &[Series],
    levels: &[(f64, String, &str)],
    title: &str,
    x_label: &str,
    y_label: &str,
    fmt_x: &dyn Fn(f64) -> String,
    fmt_y: &dyn Fn(f64) -> String,
) -> String {
    let mut o = String::new();
    frame(&mut o, title, x_label, y_label);
    let pts = || series.iter().flat_map(|s| s.points.iter().copied());
    let (mut x0, mut x1, mut y0, mut y1) = (f64::INFINITY, f64::NEG_INFINITY, f64::INFINITY, f64::NEG_INFINITY);
    for (x, y) in pts().filter(|(x, y)| x.is_finite() && y.is_finite()) {
        x0 = x0.min(x);
        x1 = x1.max(x);
        y0 = y0.min(y);
        y1 = y1.max(y);
    }
    for (v, _, _) in levels {
        y0 = y0.min(*v);
        y1 = y1.max(*v);
    }
    if !x0.is_finite() {
        (x0, x1, y0, y1) = (0.0, 1.0, 0.0, 1.0);
    }
    if x1 <= x0 {
        x1 = x0 + 1.0;
    }
    let pad_y = ((y1 - y0) * 0.05).max(1e-9);
    (y0, y1) = (y0 - pad_y, y1 + pad_y);
    let px = |x: f64| PAD + (W - 2.0 * PAD) * (x - x0) / (x1 - x0);
    let py = |y: f64| H - PAD - (H - 2.0 * PAD) * (y - y0) / (y1 - y0);
    for s in series {
        if s.dots {
            for &(x, y) in &s.points {
                let _ = write!(
                    o,
                    "<circle cx=\"{:.1}\" cy=\"{:.1}\" r=\"{}\" fill=\"{}\"/>",
                    px(x),
                    py(y),
                    s.width,
                    s.colour
                );
            }
        } else if !s.points.is_empty() {
            let d: Vec<String> = s.points.iter().map(|&(x, y)| format!("{:.1},{:.1}", px(x), py(y))).collect();
            let _ = write!(
                o,
                "<polyline points=\"{}\" fill=\"none\" stroke=\"{}\" stroke-width=\"{}\" stroke-opacity=\"0.8\"/>",
                d.join(" "),
                s.colour,
                s.width
            );
        }
    }
    for (v, label, colour) in levels {
        let y = py(*v);
        let _ = write!(
            o,
            "<line x1=\"{PAD}\" y1=\"{y:.1}\" x2=\"{}\" y2=\"{y:.1}\" stroke=\"{colour}\" stroke-dasharray=\"5,3\"/>\
             <text x=\"{}\" y=\"{:.1}\" text-anchor=\"end\" fill=\"{colour}\">{}</text>",
            W - PAD,
            W - PAD,
            y - 4.0,
            xml(label)
        );
    }
    ticks(&mut o, x0, x1, true, fmt_x);
    ticks(&mut o, y0, y1, false, fmt_y);
    o.push_str("</svg>\n");
    o
}
