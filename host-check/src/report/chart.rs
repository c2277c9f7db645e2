//! Every chart rchold draws, as SVG through `plotters`: a histogram with
//! marked values, trends over calendar dates, and the node voltage through
//! press and release. Axes carry units and ticks on round values; text is
//! laid out without system fonts, so charts render the same on a bare CI
//! machine.

use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

use crate::data::time;
use crate::fmt::si;

/// Canvas size, px.
const SIZE: (u32, u32) = (760, 400);
const FONT: &str = "sans-serif";

/// A colour of the palette the reports share.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Ink {
    /// Bars and measured points.
    Data,
    /// A limit: pass window edges, end of life, specification.
    Limit,
    /// The worst-case window.
    Corner,
    /// A centre: mean, median, nominal trace.
    Centre,
    /// A unit or trace that needs attention.
    Warn,
    /// Background traces.
    Muted,
    /// Rising-threshold band and line.
    Rise,
    /// Falling-threshold band and line.
    Fall,
}

impl Ink {
    fn rgb(self) -> RGBColor {
        match self {
            Ink::Data => RGBColor(0x4a, 0x78, 0xa8),
            Ink::Limit => RGBColor(0xb0, 0x30, 0x30),
            Ink::Corner => RGBColor(0xb3, 0x5c, 0x00),
            Ink::Centre => RGBColor(0x20, 0x70, 0x20),
            Ink::Warn => RGBColor(0xd0, 0x80, 0x20),
            Ink::Muted => RGBColor(0x9a, 0xa8, 0xb8),
            Ink::Rise => RGBColor(0xc0, 0x7a, 0x20),
            Ink::Fall => RGBColor(0x1f, 0x5f, 0x99),
        }
    }
}

/// A labelled value marked across the plot (a vertical line on a histogram,
/// a horizontal one on a trend).
#[derive(Debug, Clone, PartialEq)]
pub struct Mark {
    /// Where, in the axis's unit.
    pub at: f64,
    /// Its legend entry.
    pub label: String,
    /// Its colour.
    pub ink: Ink,
}

/// A histogram of equal-width bins.
#[derive(Debug, Clone)]
pub struct Histogram<'a> {
    /// Title above the plot.
    pub title: &'a str,
    /// What the x axis measures ("hold").
    pub quantity: &'a str,
    /// Unit of x ("s", "%/yr"); seconds-like units get SI prefixes on the ticks.
    pub unit: &'a str,
    /// Left edge of the first bin, in `unit`.
    pub lo: f64,
    /// Right edge of the last bin, in `unit`.
    pub hi: f64,
    /// Counts per bin.
    pub bins: &'a [u64],
    /// Values marked with vertical lines.
    pub marks: &'a [Mark],
}

/// A shaded interval of dates with a legend entry (a forecast's 95 % interval).
#[derive(Debug, Clone, PartialEq)]
pub struct Band {
    /// From, UTC ms.
    pub from_ms: i64,
    /// To, UTC ms.
    pub to_ms: i64,
    /// Legend entry.
    pub label: String,
}

/// One series of points `(x, value)`: on a trend `x` is UTC ms (`i64`), on
/// the node-voltage curve seconds after the press starts (`f64`).
#[derive(Debug, Clone, PartialEq)]
pub struct Series<X = i64> {
    /// Points (x, value).
    pub points: Vec<(X, f64)>,
    /// Colour.
    pub ink: Ink,
    /// Drawn as dots instead of a line.
    pub dots: bool,
    /// Legend entry (none: not in the legend).
    pub label: Option<String>,
}

/// Values over calendar dates.
#[derive(Debug, Clone)]
pub struct Trend<'a> {
    /// Title above the plot.
    pub title: &'a str,
    /// What the y axis measures, with its unit.
    pub y_desc: &'a str,
    /// The series.
    pub series: &'a [Series],
    /// Horizontal lines.
    pub levels: &'a [Mark],
    /// Shaded date intervals.
    pub bands: &'a [Band],
}

/// The node voltage through press and release.
#[derive(Debug, Clone)]
pub struct Curve<'a> {
    /// Title above the plot.
    pub title: &'a str,
    /// Traces (s after the press starts, V); the last is drawn on top.
    pub traces: &'a [Series<f64>],
    /// Threshold lines (V).
    pub levels: &'a [Mark],
    /// Threshold bands (V from, V to, label, colour).
    pub bands: &'a [(f64, f64, String, Ink)],
    /// Moments marked with vertical lines (s): the release, the hold's end.
    pub moments: &'a [Mark],
    /// Length of the press, s.
    pub press_s: f64,
    /// Time shown, s.
    pub span_s: f64,
    /// Top of the voltage axis, V.
    pub v_max: f64,
}

/// Renders into an SVG string; a drawing failure (which the SVG backend does
/// not have) leaves what was drawn so far.
fn svg(draw: impl FnOnce(&DrawingArea<SVGBackend<'_>, Shift>) -> Result<(), String>) -> String {
    let mut out = String::new();
    {
        let root = SVGBackend::with_string(&mut out, SIZE).into_drawing_area();
        let _ = root.fill(&WHITE).map_err(|e| e.to_string()).and_then(|()| draw(&root));
        let _ = root.present();
    }
    out.push('\n');
    out
}

fn err(e: impl std::fmt::Display) -> String {
    e.to_string()
}

fn ok_range(lo: f64, hi: f64) -> (f64, f64) {
    if lo.is_finite() && hi.is_finite() && hi > lo {
        (lo, hi)
    } else if lo.is_finite() {
        (lo - 0.5_f64.max(lo.abs() * 0.05), lo + 0.5_f64.max(lo.abs() * 0.05))
    } else {
        (0.0, 1.0)
    }
}

fn tick(v: f64, unit: &str) -> String {
    if unit == "s" || unit == "V" || unit == "Hz" {
        si(v, unit)
    } else {
        format!("{v:+.1}")
    }
}

/// A histogram with its marks, the count on y.
#[must_use]
pub fn histogram(h: &Histogram<'_>) -> String {
    svg(|root| {
        let (lo, hi) = ok_range(h.lo, h.hi);
        let top = h.bins.iter().copied().max().unwrap_or(0).max(1) as f64 * 1.08;
        let mut chart = ChartBuilder::on(root)
            .caption(h.title, (FONT, 15))
            .margin(12)
            .x_label_area_size(42)
            .y_label_area_size(56)
            .build_cartesian_2d(lo..hi, 0.0..top)
            .map_err(err)?;
        chart
            .configure_mesh()
            .disable_x_mesh()
            .x_labels(8)
            .y_labels(6)
            .x_desc(format!("{} ({})", h.quantity, h.unit))
            .y_desc("count")
            .x_label_formatter(&|v| tick(*v, h.unit))
            .y_label_formatter(&|v| format!("{v:.0}"))
            .draw()
            .map_err(err)?;
        let width = (hi - lo) / h.bins.len().max(1) as f64;
        let fill = Ink::Data.rgb().filled();
        chart
            .draw_series(h.bins.iter().enumerate().filter(|(_, &n)| n > 0).map(|(i, &n)| {
                let x0 = lo + width * i as f64;
                Rectangle::new([(x0, 0.0), (x0 + width * 0.96, n as f64)], fill)
            }))
            .map_err(err)?;
        for m in h.marks.iter().filter(|m| (lo..=hi).contains(&m.at)) {
            let style = m.ink.rgb().stroke_width(2);
            chart
                .draw_series(DashedLineSeries::new([(m.at, 0.0), (m.at, top)], 6, 4, style))
                .map_err(err)?
                .label(&m.label)
                .legend(move |(x, y)| PathElement::new([(x, y), (x + 18, y)], style));
        }
        // The legend goes over the emptier third of the bins.
        let third = h.bins.len() / 3;
        let left: u64 = h.bins.iter().take(third).sum();
        let right: u64 = h.bins.iter().rev().take(third).sum();
        let at = if left < right { SeriesLabelPosition::UpperLeft } else { SeriesLabelPosition::UpperRight };
        legend(&mut chart, at)
    })
}

fn legend<'a, DB: DrawingBackend + 'a, CT: plotters::coord::CoordTranslate>(
    chart: &mut ChartContext<'a, DB, CT>,
    at: SeriesLabelPosition,
) -> Result<(), String> {
    chart
        .configure_series_labels()
        .position(at)
        .background_style(WHITE.mix(0.85))
        .border_style(BLACK.mix(0.3))
        .label_font((FONT, 12))
        .draw()
        .map_err(err)
}

/// UTC ms of the first of month `k` (months since 1970-01).
fn month_start_ms(k: i64) -> i64 {
    let (y, m) = (k.div_euclid(12) + 1970, k.rem_euclid(12) as u8 + 1);
    ::time::Month::try_from(m)
        .ok()
        .and_then(|m| ::time::Date::from_calendar_date(i32::try_from(y).unwrap_or(1970), m, 1).ok())
        .map_or(0, |d| d.midnight().assume_utc().unix_timestamp() * 1000)
}

/// A time as months since 1970-01 (the fraction is the share of its month
/// gone), so that round values on the axis fall on the first of a month.
fn months(ms: i64) -> f64 {
    let date = ::time::OffsetDateTime::from_unix_timestamp(ms.div_euclid(1000)).map_or(::time::Date::MIN, |t| t.date());
    let k = (i64::from(date.year()) - 1970) * 12 + i64::from(u8::from(date.month())) - 1;
    let (a, b) = (month_start_ms(k), month_start_ms(k + 1));
    k as f64 + (ms - a) as f64 / (b - a).max(1) as f64
}

/// The inverse of [`months`], as a date.
fn month_label(x: f64) -> String {
    let k = x.floor() as i64;
    let (a, b) = (month_start_ms(k), month_start_ms(k + 1));
    let ms = a + ((x - k as f64) * (b - a) as f64).round() as i64;
    if (x - x.round()).abs() < 1e-6 {
        time::date_of(month_start_ms(x.round() as i64)).get(..7).map_or_else(String::new, str::to_owned)
    } else {
        time::date_of(ms)
    }
}

/// Labelled bars, each with an optional second value drawn beside it.
#[derive(Debug, Clone)]
pub struct Bars<'a> {
    /// Title above the plot.
    pub title: &'a str,
    /// What the bars measure, with its unit.
    pub quantity: &'a str,
    /// (label, value, second value).
    pub bars: &'a [(String, f64, Option<f64>)],
}

/// A bar chart: first-order values in the data colour, second values (a
/// check of them) beside in the centre colour.
#[must_use]
pub fn bars(b: &Bars<'_>) -> String {
    svg(|root| {
        let n = b.bars.len().max(1);
        let top = b.bars.iter().map(|x| x.1.max(x.2.unwrap_or(0.0))).fold(1e-9, f64::max) * 1.1;
        let mut chart = ChartBuilder::on(root)
            .caption(b.title, (FONT, 15))
            .margin(12)
            .x_label_area_size(42)
            .y_label_area_size(56)
            .build_cartesian_2d(0.0..n as f64, 0.0..top)
            .map_err(err)?;
        let labels: Vec<String> = b.bars.iter().map(|x| x.0.clone()).collect();
        chart
            .configure_mesh()
            .disable_x_mesh()
            .x_labels(n * 2 + 1)
            .x_label_formatter(&|x| {
                let k = x.floor();
                let i = k as usize;
                if (x - k - 0.5).abs() < 0.01 {
                    labels.get(i).cloned().unwrap_or_default()
                } else {
                    String::new()
                }
            })
            .y_desc(b.quantity)
            .y_label_formatter(&|v| format!("{v:.0}"))
            .draw()
            .map_err(err)?;
        let first = Ink::Data.rgb().filled();
        let second = Ink::Centre.rgb().filled();
        chart
            .draw_series(b.bars.iter().enumerate().map(|(i, x)| {
                let at = i as f64;
                Rectangle::new([(at + 0.12, 0.0), (at + 0.48, x.1)], first)
            }))
            .map_err(err)?
            .label("first order, from the model")
            .legend(move |(x, y)| Rectangle::new([(x, y - 5), (x + 18, y + 5)], first));
        if b.bars.iter().any(|x| x.2.is_some()) {
            chart
                .draw_series(b.bars.iter().enumerate().filter_map(|(i, x)| {
                    x.2.map(|v| Rectangle::new([(i as f64 + 0.52, 0.0), (i as f64 + 0.88, v.max(0.0))], second))
                }))
                .map_err(err)?
                .label("Monte Carlo, with it frozen")
                .legend(move |(x, y)| Rectangle::new([(x, y - 5), (x + 18, y + 5)], second));
        }
        legend(&mut chart, SeriesLabelPosition::UpperRight)
    })
}

/// How a trend's time axis counts: in days for spans under 90 days (ticks
/// on whole days), else in months (ticks on the first of a month).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum DateAxis {
    Days,
    Months,
}

const DAY_MS: i64 = 86_400_000;

impl DateAxis {
    fn for_span(span_ms: i64) -> DateAxis {
        if span_ms < 90 * DAY_MS {
            DateAxis::Days
        } else {
            DateAxis::Months
        }
    }

    fn x(self, ms: i64) -> f64 {
        match self {
            DateAxis::Days => ms as f64 / DAY_MS as f64,
            DateAxis::Months => months(ms),
        }
    }

    fn label(self, x: f64) -> String {
        match self {
            DateAxis::Months => month_label(x),
            DateAxis::Days if (x - x.round()).abs() < 1e-6 => time::date_of((x.round() as i64).saturating_mul(DAY_MS)),
            DateAxis::Days => {
                let t = time::format_ms((x * DAY_MS as f64).round() as i64);
                format!("{} {}", t.get(..10).unwrap_or(""), t.get(11..16).unwrap_or(""))
            }
        }
    }
}

/// Values over time, the x axis in calendar dates (UTC).
#[must_use]
pub fn trend(t: &Trend<'_>) -> String {
    svg(|root| {
        let all_ms = t
            .series
            .iter()
            .flat_map(|s| s.points.iter().map(|p| p.0))
            .chain(t.bands.iter().flat_map(|b| [b.from_ms, b.to_ms]));
        let (first, last) = all_ms.fold((i64::MAX, i64::MIN), |(a, b), x| (a.min(x), b.max(x)));
        // No points (a store without field units): an empty day at the epoch, not a span of ±2^63 ms.
        let (first, last) = if first > last { (0, DAY_MS) } else { (first, last) };
        let axis = DateAxis::for_span(last.saturating_sub(first));
        let (x0, x1) = ok_range(axis.x(first), axis.x(last));
        let ys = t.series.iter().flat_map(|s| s.points.iter().map(|p| p.1)).chain(t.levels.iter().map(|m| m.at));
        let (y0, y1) =
            ys.filter(|y| y.is_finite()).fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), y| (a.min(y), b.max(y)));
        let (x0, x1) = (x0 - (x1 - x0) * 0.02, x1 + (x1 - x0) * 0.02);
        let (y0, y1) = ok_range(y0, y1);
        let pad = (y1 - y0) * 0.06;
        // Enough decimals that neighbouring ticks differ.
        let decimals = (-((y1 - y0) / 6.0).log10()).ceil().clamp(0.0, 6.0) as usize;
        let mut chart = ChartBuilder::on(root)
            .caption(t.title, (FONT, 14))
            .margin(12)
            .x_label_area_size(42)
            .y_label_area_size(62)
            .build_cartesian_2d(x0..x1, (y0 - pad)..(y1 + pad))
            .map_err(err)?;
        chart
            .configure_mesh()
            .x_labels(8)
            .y_labels(7)
            .x_desc("date (UTC)")
            .y_desc(t.y_desc)
            .x_label_formatter(&|x| axis.label(*x))
            .y_label_formatter(&|v| format!("{v:.decimals$}"))
            .draw()
            .map_err(err)?;
        for b in t.bands {
            let style = Ink::Warn.rgb().mix(0.18).filled();
            let (a, z) = (axis.x(b.from_ms), axis.x(b.to_ms));
            chart
                .draw_series([Rectangle::new([(a, y0 - pad), (z, y1 + pad)], style)])
                .map_err(err)?
                .label(&b.label)
                .legend(move |(x, y)| Rectangle::new([(x, y - 5), (x + 18, y + 5)], style));
        }
        for s in t.series {
            let colour = s.ink.rgb();
            let pts = s.points.iter().map(|&(ms, v)| (axis.x(ms), v));
            let drawn = if s.dots {
                chart.draw_series(pts.map(|p| Circle::new(p, 2, colour.filled()))).map_err(err)?
            } else {
                chart.draw_series(LineSeries::new(pts, colour.stroke_width(1))).map_err(err)?
            };
            if let Some(label) = &s.label {
                drawn
                    .label(label)
                    .legend(move |(x, y)| PathElement::new([(x, y), (x + 18, y)], colour.stroke_width(2)));
            }
        }
        for m in t.levels {
            let style = m.ink.rgb().stroke_width(2);
            chart
                .draw_series(DashedLineSeries::new([(x0, m.at), (x1, m.at)], 6, 4, style))
                .map_err(err)?
                .label(&m.label)
                .legend(move |(x, y)| PathElement::new([(x, y), (x + 18, y)], style));
        }
        // Trends start near the top left and fall to the right: the middle left is free.
        legend(&mut chart, SeriesLabelPosition::MiddleLeft)
    })
}

/// The node voltage over time. When the press is short against the span
/// (under a tenth of it) the time axis is split: the press and turn-on on
/// the left at their own scale, the release and hold on the right.
#[must_use]
pub fn curve(c: &Curve<'_>) -> String {
    svg(|root| {
        let root = root.titled(c.title, (FONT, 15)).map_err(err)?;
        if c.press_s < 0.1 * c.span_s {
            let (left, right) = root.split_horizontally(230);
            let press_end = (c.press_s * 1.2).max(c.span_s * 1e-6);
            curve_panel(&left, c, 0.0, press_end, "press (s)", false)?;
            curve_panel(&right, c, c.press_s, c.span_s, "time from the press (s)", true)
        } else {
            curve_panel(&root, c, 0.0, c.span_s, "time from the press (s)", true)
        }
    })
}

fn curve_panel(
    area: &DrawingArea<SVGBackend<'_>, Shift>,
    c: &Curve<'_>,
    t0: f64,
    t1: f64,
    x_desc: &str,
    with_legend: bool,
) -> Result<(), String> {
    let mut chart = ChartBuilder::on(area)
        .margin(10)
        .x_label_area_size(42)
        .y_label_area_size(56)
        .build_cartesian_2d(t0..t1, 0.0..c.v_max)
        .map_err(err)?;
    chart
        .configure_mesh()
        .x_labels(if with_legend { 7 } else { 3 })
        .y_labels(7)
        .x_desc(x_desc)
        .y_desc("node voltage (V)")
        .x_label_formatter(&|v| si(*v, "s"))
        .y_label_formatter(&|v| format!("{v:.1}"))
        .draw()
        .map_err(err)?;
    // A threshold is one legend entry: its band shaded, its typical value dashed.
    for (a, b, label, ink) in c.bands {
        let style = ink.rgb().mix(0.22).filled();
        chart
            .draw_series([Rectangle::new([(t0, *a), (t1, *b)], style)])
            .map_err(err)?
            .label(label)
            .legend(move |(x, y)| Rectangle::new([(x, y - 5), (x + 18, y + 5)], style));
    }
    for m in c.levels {
        let style = m.ink.rgb().stroke_width(1);
        let drawn = chart.draw_series(DashedLineSeries::new([(t0, m.at), (t1, m.at)], 5, 4, style)).map_err(err)?;
        if c.bands.is_empty() {
            drawn.label(&m.label).legend(move |(x, y)| PathElement::new([(x, y), (x + 18, y)], style));
        }
    }
    // Moments are named beside their line, inside the plot.
    for m in c.moments.iter().filter(|m| t0 < m.at && m.at < t1) {
        let style = m.ink.rgb().stroke_width(1);
        chart.draw_series(DashedLineSeries::new([(m.at, 0.0), (m.at, c.v_max)], 3, 3, style)).map_err(err)?;
        let at = chart.backend_coord(&(m.at, c.v_max));
        let font = (FONT, 11).into_font().color(&m.ink.rgb()).pos(Pos::new(HPos::Right, VPos::Top));
        area.draw(&Text::new(m.label.clone(), (at.0 - 4, at.1 + 4), font)).map_err(err)?;
    }
    for (i, tr) in c.traces.iter().enumerate() {
        let width = if i + 1 == c.traces.len() { 2 } else { 1 };
        let colour = tr.ink.rgb();
        let pts = tr.points.iter().copied().filter(|(t, _)| (t0..=t1).contains(t));
        let drawn = chart.draw_series(LineSeries::new(pts, colour.stroke_width(width))).map_err(err)?;
        if let Some(label) = &tr.label {
            drawn.label(label).legend(move |(x, y)| PathElement::new([(x, y), (x + 18, y)], colour.stroke_width(2)));
        }
    }
    if with_legend {
        // The charge sits high on the left and the decay ends low on the right: the
        // lower left is free.
        legend(&mut chart, SeriesLabelPosition::LowerLeft)?;
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn count(svg: &str, what: &str) -> usize {
        svg.matches(what).count()
    }

    #[test]
    fn histogram_has_axes_units_and_marks() {
        let marks = [Mark { at: 0.7, label: "pass from 700.0 ms".into(), ink: Ink::Limit }];
        let s = histogram(&Histogram {
            title: "bay <1>",
            quantity: "hold",
            unit: "s",
            lo: 0.5,
            hi: 1.0,
            bins: &[1, 4, 9, 4, 1],
            marks: &marks,
        });
        assert!(s.starts_with("<svg"), "{s}");
        assert!(s.contains("hold (s)") && s.contains("count"));
        assert!(s.contains("pass from 700.0 ms"));
        // Titles are escaped; ticks fall on round values with SI prefixes.
        assert!(s.contains("bay &lt;1&gt;"), "{s}");
        assert!(s.contains("600.0 ms") || s.contains("700.0 ms"));
        assert!(count(&s, "<rect") >= 5);
    }

    /// A trend with nothing in it (`report` on a store without field units)
    /// overflowed an i64 labelling an axis from −2^63 to 2^63 ms.
    #[test]
    fn an_empty_trend_draws() {
        let s = trend(&Trend { title: "fleet", y_desc: "C/C0", series: &[], levels: &[], bands: &[] });
        assert!(s.starts_with("<svg") && s.contains("1970-01-01"), "{s}");
    }

    #[test]
    fn bars_are_labelled() {
        let bars = [("c".to_owned(), 80.0, Some(79.0)), ("r".to_owned(), 20.0, None)];
        let s = bars_svg_for_test(&bars);
        assert!(s.contains(">\nc\n<") || s.contains(">c<"), "{s}");
        assert!(s.contains("Monte Carlo, with it frozen"));
    }

    fn bars_svg_for_test(b: &[(String, f64, Option<f64>)]) -> String {
        bars(&Bars { title: "t", quantity: "share (%)", bars: b })
    }

    #[test]
    fn trend_shows_dates_and_bands() {
        let day = 86_400_000;
        let start = 1_798_761_600_000; // 2027-01-01T00:00:00Z
        let series = [Series {
            points: (0..100).map(|d| (start + d * day, 1.0 - 0.001 * d as f64)).collect(),
            ink: Ink::Data,
            dots: true,
            label: Some("measured".into()),
        }];
        let levels = [Mark { at: 0.9, label: "end of life".into(), ink: Ink::Limit }];
        let bands = [Band { from_ms: start + 90 * day, to_ms: start + 110 * day, label: "95 % interval".into() }];
        let s = trend(&Trend { title: "unit 7", y_desc: "C/C₀", series: &series, levels: &levels, bands: &bands });
        assert!(s.contains("2027-02") && s.contains("2027-04"), "months on the axis: {s}");
        assert_eq!(month_label(months(start)), "2027-01");
        assert_eq!(month_start_ms(57 * 12), start);
        assert!(s.contains("95 % interval") && s.contains("end of life") && s.contains("date (UTC)"));
        // A span of days is counted in days, on whole days.
        assert_eq!(DateAxis::for_span(5 * DAY_MS), DateAxis::Days);
        assert_eq!(DateAxis::Days.label(DateAxis::Days.x(start)), "2027-01-01");
        assert_eq!(DateAxis::Days.label(DateAxis::Days.x(start + DAY_MS / 2)), "2027-01-01 12:00");
    }

    #[test]
    fn a_short_press_splits_the_time_axis() {
        let traces = [Series {
            points: vec![(0.0, 0.0), (1e-4, 4.4), (2.0, 1.0)],
            ink: Ink::Centre,
            dots: false,
            label: Some("nominal".into()),
        }];
        let c = Curve {
            title: "t",
            traces: &traces,
            levels: &[],
            bands: &[],
            moments: &[],
            press_s: 1e-3,
            span_s: 2.0,
            v_max: 5.25,
        };
        let split = curve(&c);
        assert_eq!(count(&split, "node voltage (V)"), 2, "two panels");
        let whole = curve(&Curve { press_s: 1.0, ..c });
        assert_eq!(count(&whole, "node voltage (V)"), 1);
    }
}
