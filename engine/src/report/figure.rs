//! Figures as SVG strings, drawn with plotters (no system fonts; text is laid out by
//! plotters' built-in metrics and rendered by the viewer's sans-serif font).
//!
//! Colours: the colour-blind-safe palette of M. Okabe and K. Ito, "Color Universal
//! Design (CUD): how to make figures and presentations that are friendly to
//! colorblind people" (2008). Curves are told apart by role: data black, background
//! sky blue, components cycling through orange, bluish green, reddish purple, blue
//! and yellow, the envelope vermillion and thicker, guides reddish purple.
//!
//! Figures are deterministic: the same input gives the same bytes. Every text that
//! comes from data (axis quantities, curve names) is XML-escaped by the plotters SVG
//! backend; the only SVG written here by hand is the `<image>` element of a
//! micrograph thumbnail, whose attributes are numbers and a base64 data URI.

use super::lttb::decimate_runs;
use super::number::format_plain;
use plotters::coord::Shift;
use plotters::prelude::*;
use stages::{CurveRole, Image, Labels, Record, Spectrum, Table};

pub const BLACK_: RGBColor = RGBColor(0x00, 0x00, 0x00);
pub const ORANGE: RGBColor = RGBColor(0xE6, 0x9F, 0x00);
pub const SKY_BLUE: RGBColor = RGBColor(0x56, 0xB4, 0xE9);
pub const BLUISH_GREEN: RGBColor = RGBColor(0x00, 0x9E, 0x73);
pub const YELLOW: RGBColor = RGBColor(0xF0, 0xE4, 0x42);
pub const BLUE: RGBColor = RGBColor(0x00, 0x72, 0xB2);
pub const VERMILLION: RGBColor = RGBColor(0xD5, 0x5E, 0x00);
pub const REDDISH_PURPLE: RGBColor = RGBColor(0xCC, 0x79, 0xA7);
const GREY: RGBColor = RGBColor(0x88, 0x88, 0x88);
/// Component colours, in order of use (orange last: it is closest to the envelope).
const COMPONENTS: [RGBColor; 5] = [BLUISH_GREEN, REDDISH_PURPLE, BLUE, ORANGE, YELLOW];

const FONT: &str = "sans-serif";
const WIDTH: u32 = 640;
const HEIGHT: u32 = 400;
const LOWER_PANEL: u32 = 130;
/// Data drawn as markers up to this many points, as a line beyond.
const MARKER_LIMIT: usize = 150;
/// Largest side of a micrograph thumbnail, in image pixels.
pub const THUMB_MAX: usize = 240;
/// Largest side of a micrograph as drawn, in SVG pixels.
const THUMB_DRAWN: f64 = 360.0;

type Fig<T> = Result<T, String>;

fn pe<E: std::fmt::Display>(e: E) -> String {
    format!("drawing failed: {e}")
}

/// Short tick labels: six significant digits, no float noise.
fn tick(v: &f64) -> String {
    format_plain(*v)
}

/// Finite min and max of several series; None when there is no finite value.
fn extent<'a>(series: impl IntoIterator<Item = &'a [f64]>) -> Option<(f64, f64)> {
    let mut lo = f64::INFINITY;
    let mut hi = f64::NEG_INFINITY;
    for s in series {
        for &v in s {
            if v.is_finite() {
                lo = lo.min(v);
                hi = hi.max(v);
            }
        }
    }
    (lo <= hi).then_some((lo, hi))
}

/// Pads a range by 5 % on each side (or ±1 / ±|v|·10 % when it is a single value).
fn padded((lo, hi): (f64, f64)) -> (f64, f64) {
    if hi > lo {
        let p = 0.05 * (hi - lo);
        (lo - p, hi + p)
    } else {
        let p = if lo == 0.0 { 1.0 } else { 0.1 * lo.abs() };
        (lo - p, hi + p)
    }
}

/// The x range in the trade's drawing direction.
fn x_range(lo: f64, hi: f64, reversed: bool) -> std::ops::Range<f64> {
    if reversed {
        hi..lo
    } else {
        lo..hi
    }
}

fn style_of(role: CurveRole, component: usize) -> (ShapeStyle, bool) {
    // (style, drawn in the lower panel)
    match role {
        CurveRole::Background => (SKY_BLUE.stroke_width(2), false),
        CurveRole::Component => (
            COMPONENTS[component % COMPONENTS.len()].stroke_width(2),
            false,
        ),
        CurveRole::Envelope => (VERMILLION.stroke_width(2), false),
        CurveRole::Residual => (BLACK_.stroke_width(1), true),
        CurveRole::Smoothed => (BLUE.stroke_width(2), false),
        CurveRole::Derivative => (BLUISH_GREEN.stroke_width(1), true),
        CurveRole::Reference => (GREY.stroke_width(1), false),
        CurveRole::Guide => (REDDISH_PURPLE.stroke_width(2), false),
    }
}

/// The upper corner where the data are lower: the legend covers less there.
/// Compares the highest y in the leftmost and rightmost 35 % of the drawn x range.
fn legend_corner(s: &Spectrum, reversed: bool) -> SeriesLabelPosition {
    let Some((lo, hi)) = extent([s.x.as_slice()]) else {
        return SeriesLabelPosition::UpperRight;
    };
    let span = hi - lo;
    let (mut low_side, mut high_side) = (f64::NEG_INFINITY, f64::NEG_INFINITY);
    for (x, y) in s.x.iter().zip(&s.y) {
        if *x <= lo + 0.35 * span {
            low_side = low_side.max(*y);
        } else if *x >= hi - 0.35 * span {
            high_side = high_side.max(*y);
        }
    }
    // Drawn left is low x, unless the axis is reversed.
    let (left, right) = if reversed {
        (high_side, low_side)
    } else {
        (low_side, high_side)
    };
    if left < right {
        SeriesLabelPosition::UpperLeft
    } else {
        SeriesLabelPosition::UpperRight
    }
}

/// Where a straight guide line crosses y = 0, from its first and last finite points.
pub fn guide_intercept(x: &[f64], guide: &[f64]) -> Option<f64> {
    let pts: Vec<(f64, f64)> = x
        .iter()
        .zip(guide)
        .filter(|(a, b)| a.is_finite() && b.is_finite())
        .map(|(a, b)| (*a, *b))
        .collect();
    let (&(x1, y1), &(x2, y2)) = (pts.first()?, pts.last()?);
    if x1 == x2 || y1 == y2 {
        return None;
    }
    let slope = (y2 - y1) / (x2 - x1);
    let x0 = x1 - y1 / slope;
    x0.is_finite().then_some(x0)
}

/// A spectrum with every curve it carries: data, background, components, envelope,
/// smoothed and reference copies, guide lines with their x intercept marked, and a
/// lower panel for residuals or derivatives. `points` is the per-curve budget;
/// `marks` are located peaks (x, y), drawn as small triangles.
pub fn spectrum_svg(s: &Spectrum, points: usize, marks: &[(f64, f64)]) -> Fig<String> {
    let upper_curves: Vec<&stages::Curve> =
        s.curves.iter().filter(|c| !style_of(c.role, 0).1).collect();
    let lower_curves: Vec<&stages::Curve> =
        s.curves.iter().filter(|c| style_of(c.role, 0).1).collect();
    let guide = s.curve(CurveRole::Guide);
    let intercept = guide.and_then(|g| guide_intercept(&s.x, &g.y));

    let (xlo, xhi) = extent([s.x.as_slice()]).ok_or("the spectrum has no finite x")?;
    let mut ys: Vec<&[f64]> = vec![s.y.as_slice()];
    ys.extend(upper_curves.iter().map(|c| c.y.as_slice()));
    let (mut ylo, mut yhi) = extent(ys).ok_or("the spectrum has no finite y")?;
    if guide.is_some() {
        ylo = ylo.min(0.0);
        yhi = yhi.max(0.0);
    }
    let (ylo, yhi) = padded((ylo, yhi));
    let (xlo, xhi) = padded((xlo, xhi));
    let reversed = s.x_axis.drawn_reversed();
    let height = if lower_curves.is_empty() {
        HEIGHT
    } else {
        HEIGHT + LOWER_PANEL
    };

    let mut buf = String::new();
    {
        let root = SVGBackend::with_string(&mut buf, (WIDTH, height)).into_drawing_area();
        root.fill(&WHITE).map_err(pe)?;
        let (upper, lower) = if lower_curves.is_empty() {
            (root.clone(), None)
        } else {
            let (u, l) = root.split_vertically(HEIGHT);
            (u, Some(l))
        };
        let mut chart = ChartBuilder::on(&upper)
            .margin(12)
            .x_label_area_size(44)
            .y_label_area_size(70)
            .build_cartesian_2d(x_range(xlo, xhi, reversed), ylo..yhi)
            .map_err(pe)?;
        chart
            .configure_mesh()
            .disable_mesh()
            .x_labels(7)
            .y_labels(6)
            .x_label_formatter(&tick)
            .y_label_formatter(&tick)
            .x_desc(s.x_axis.label())
            .y_desc(s.y_axis.label())
            .label_style((FONT, 15))
            .axis_desc_style((FONT, 16))
            .draw()
            .map_err(pe)?;

        // Data first, so fitted curves lie on top.
        let markers = s.len() <= MARKER_LIMIT;
        for run in decimate_runs(&s.x, &s.y, points) {
            if markers {
                chart
                    .draw_series(
                        run.iter()
                            .map(|&p| Circle::new(p, 2, BLACK_.mix(0.75).filled())),
                    )
                    .map_err(pe)?;
            } else {
                chart
                    .draw_series(LineSeries::new(run, BLACK_.stroke_width(1)))
                    .map_err(pe)?;
            }
        }
        let mut legend_data = false;
        let mut component = 0;
        for c in &upper_curves {
            let (style, _) = style_of(c.role, component);
            if c.role == CurveRole::Component {
                component += 1;
            }
            let mut first = true;
            for run in decimate_runs(&s.x, &c.y, points) {
                let series = chart.draw_series(LineSeries::new(run, style)).map_err(pe)?;
                if first {
                    series
                        .label(c.name.clone())
                        .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], style));
                    first = false;
                }
            }
            legend_data = true;
        }
        if !marks.is_empty() {
            chart
                .draw_series(
                    marks
                        .iter()
                        .filter(|(x, y)| x.is_finite() && y.is_finite())
                        .map(|&p| TriangleMarker::new(p, 5, VERMILLION.filled())),
                )
                .map_err(pe)?
                .label("located peaks")
                .legend(|(x, y)| TriangleMarker::new((x + 9, y), 5, VERMILLION.filled()));
            legend_data = true;
        }
        if let Some(x0) = intercept {
            if (xlo.min(xhi)..=xhi.max(xlo)).contains(&x0) {
                chart
                    .draw_series(LineSeries::new(
                        vec![(xlo, 0.0), (xhi, 0.0)],
                        GREY.stroke_width(1),
                    ))
                    .map_err(pe)?;
                chart
                    .draw_series(std::iter::once(TriangleMarker::new(
                        (x0, 0.0),
                        6,
                        REDDISH_PURPLE.filled(),
                    )))
                    .map_err(pe)?;
                let label = format!("intercept {} {}", format_plain(x0), s.x_axis.unit);
                chart
                    .draw_series(std::iter::once(
                        EmptyElement::at((x0, 0.0))
                            + Text::new(label.trim_end().to_string(), (6, -18), (FONT, 15)),
                    ))
                    .map_err(pe)?;
            }
        }
        if legend_data {
            chart
                .configure_series_labels()
                .position(legend_corner(s, reversed))
                .background_style(WHITE.mix(0.85))
                .border_style(GREY)
                .label_font((FONT, 14))
                .draw()
                .map_err(pe)?;
        }

        if let Some(lower) = lower {
            let lys: Vec<&[f64]> = lower_curves.iter().map(|c| c.y.as_slice()).collect();
            let (llo, lhi) = padded(extent(lys).unwrap_or((-1.0, 1.0)));
            let desc = lower_curves
                .iter()
                .map(|c| c.name.as_str())
                .collect::<Vec<_>>()
                .join(", ");
            let mut lc = ChartBuilder::on(&lower)
                .margin(12)
                .x_label_area_size(24)
                .y_label_area_size(70)
                .build_cartesian_2d(x_range(xlo, xhi, reversed), llo..lhi)
                .map_err(pe)?;
            lc.configure_mesh()
                .disable_mesh()
                .x_labels(7)
                .y_labels(3)
                .x_label_formatter(&tick)
                .y_label_formatter(&tick)
                .y_desc(desc)
                .label_style((FONT, 14))
                .axis_desc_style((FONT, 15))
                .draw()
                .map_err(pe)?;
            if llo < 0.0 && lhi > 0.0 {
                lc.draw_series(LineSeries::new(
                    vec![(xlo, 0.0), (xhi, 0.0)],
                    GREY.stroke_width(1),
                ))
                .map_err(pe)?;
            }
            for c in &lower_curves {
                let (style, _) = style_of(c.role, 0);
                for run in decimate_runs(&s.x, &c.y, points) {
                    lc.draw_series(LineSeries::new(run, style)).map_err(pe)?;
                }
            }
        }
        root.present().map_err(pe)?;
    }
    Ok(buf)
}

/// A numeric column by one of several names (case-insensitive).
fn numeric<'a>(t: &'a Table, names: &[&str]) -> Option<(&'a stages::Column, &'a [f64])> {
    t.columns.iter().find_map(|c| {
        let n = c.name.to_ascii_lowercase();
        match &c.data {
            stages::ColumnData::Number { values, .. } if names.contains(&n.as_str()) => {
                Some((c, values.as_slice()))
            }
            _ => None,
        }
    })
}

fn axis_label(name: &str, unit: &str) -> String {
    stages::Axis::new(name.replace('_', " "), unit).label()
}

/// How a table is drawn, when it can be. The rules (documented in the report
/// module): a histogram needs number columns `bin_low`, `bin_high` and `count`
/// (optionally `model`/`fitted` drawn as a line over the bin centres); a calibration
/// curve needs two number columns `x` and `y` named in [`CALIBRATION_X`] /
/// [`CALIBRATION_Y`] or, failing that, the first two number columns together with
/// `slope` and `intercept` results; a text column `role` marks `standard` and
/// `unknown` rows.
pub fn table_svg(t: &Table, results: &[Record]) -> Fig<Option<String>> {
    if let (Some(lo), Some(hi), Some(count)) = (
        numeric(t, &["bin_low", "bin_start", "lower"]),
        numeric(t, &["bin_high", "bin_end", "upper"]),
        numeric(t, &["count", "counts", "frequency"]),
    ) {
        let model = numeric(t, &["model", "fitted", "fit", "density"]);
        return histogram_svg(t, lo, hi, count, model).map(Some);
    }
    calibration_svg(t, results)
}

/// Column names read as the x and y of a calibration curve.
pub const CALIBRATION_X: &[&str] = &["concentration", "amount", "x", "nominal"];
pub const CALIBRATION_Y: &[&str] = &["response", "signal", "absorbance", "area", "y"];

type Col<'a> = (&'a stages::Column, &'a [f64]);

fn histogram_svg(
    t: &Table,
    lo: Col<'_>,
    hi: Col<'_>,
    count: Col<'_>,
    model: Option<Col<'_>>,
) -> Fig<String> {
    let (xlo, xhi) = extent([lo.1, hi.1]).ok_or("the histogram has no finite bins")?;
    let mut tops: Vec<&[f64]> = vec![count.1];
    if let Some(m) = model {
        tops.push(m.1);
    }
    let (_, ytop) = extent(tops).unwrap_or((0.0, 1.0));
    let quantity =
        lo.0.name
            .trim_end_matches("_low")
            .trim_end_matches("_start");
    let quantity = if quantity.is_empty() || quantity == "bin" || quantity == "lower" {
        if t.title.is_empty() {
            "value"
        } else {
            t.title.as_str()
        }
    } else {
        quantity
    };
    let mut buf = String::new();
    {
        let root = SVGBackend::with_string(&mut buf, (WIDTH, HEIGHT)).into_drawing_area();
        root.fill(&WHITE).map_err(pe)?;
        let (xlo, xhi) = padded((xlo, xhi));
        let mut chart = ChartBuilder::on(&root)
            .margin(12)
            .x_label_area_size(44)
            .y_label_area_size(60)
            .build_cartesian_2d(xlo..xhi, 0.0..(ytop.max(1.0) * 1.08))
            .map_err(pe)?;
        chart
            .configure_mesh()
            .disable_mesh()
            .x_label_formatter(&tick)
            .y_label_formatter(&tick)
            .x_desc(axis_label(quantity, &lo.0.unit))
            .y_desc(axis_label(&count.0.name, &count.0.unit))
            .label_style((FONT, 15))
            .axis_desc_style((FONT, 16))
            .draw()
            .map_err(pe)?;
        let bins = lo.1.iter().zip(hi.1).zip(count.1);
        chart
            .draw_series(
                bins.filter(|((a, b), c)| a.is_finite() && b.is_finite() && c.is_finite())
                    .flat_map(|((a, b), c)| {
                        [
                            Rectangle::new([(*a, 0.0), (*b, *c)], SKY_BLUE.mix(0.8).filled()),
                            Rectangle::new([(*a, 0.0), (*b, *c)], BLUE.stroke_width(1)),
                        ]
                    }),
            )
            .map_err(pe)?;
        if let Some(m) = model {
            let centres: Vec<f64> = lo.1.iter().zip(hi.1).map(|(a, b)| 0.5 * (a + b)).collect();
            for run in decimate_runs(&centres, m.1, 1000) {
                chart
                    .draw_series(LineSeries::new(run, VERMILLION.stroke_width(2)))
                    .map_err(pe)?
                    .label(m.0.name.clone())
                    .legend(|(x, y)| {
                        PathElement::new(vec![(x, y), (x + 18, y)], VERMILLION.stroke_width(2))
                    });
            }
            chart
                .configure_series_labels()
                .background_style(WHITE.mix(0.85))
                .border_style(GREY)
                .label_font((FONT, 14))
                .draw()
                .map_err(pe)?;
        }
        root.present().map_err(pe)?;
    }
    Ok(buf)
}

fn result_number(results: &[Record], suffix: &str) -> Option<f64> {
    results
        .iter()
        .find(|r| r.name == suffix || r.name.ends_with(&format!(".{suffix}")))
        .and_then(|r| r.as_number())
}

fn calibration_svg(t: &Table, results: &[Record]) -> Fig<Option<String>> {
    let slope = result_number(results, "slope");
    let intercept = result_number(results, "intercept");
    let named = numeric(t, CALIBRATION_X).zip(numeric(t, CALIBRATION_Y));
    let (xc, yc) = match named {
        Some(p) => p,
        None if slope.is_some() => {
            let mut nums = t.columns.iter().filter_map(|c| match &c.data {
                stages::ColumnData::Number { values, .. } => Some((c, values.as_slice())),
                _ => None,
            });
            match (nums.next(), nums.next()) {
                (Some(a), Some(b)) => (a, b),
                _ => return Ok(None),
            }
        }
        None => return Ok(None),
    };
    let roles: Option<&Vec<String>> = t.columns.iter().find_map(|c| match &c.data {
        stages::ColumnData::Text(v) if c.name.eq_ignore_ascii_case("role") => Some(v),
        _ => None,
    });
    let y_unc: Option<&Vec<f64>> = match &yc.0.data {
        stages::ColumnData::Number { uncertainty, .. } => uncertainty.as_ref(),
        _ => None,
    };
    let (xlo, xhi) = extent([xc.1]).ok_or("the calibration table has no finite x")?;
    let mut ys = vec![yc.1.to_vec()];
    if let (Some(m), Some(b)) = (slope, intercept) {
        ys.push(vec![m * xlo + b, m * xhi + b]);
    }
    if let Some(u) = y_unc {
        ys.push(yc.1.iter().zip(u).map(|(y, u)| y + u).collect());
        ys.push(yc.1.iter().zip(u).map(|(y, u)| y - u).collect());
    }
    let (ylo, yhi) = extent(ys.iter().map(|v| v.as_slice())).unwrap_or((0.0, 1.0));
    let (xlo, xhi) = padded((xlo.min(0.0), xhi));
    let (ylo, yhi) = padded((ylo.min(0.0), yhi));
    let mut buf = String::new();
    {
        let root = SVGBackend::with_string(&mut buf, (WIDTH, HEIGHT)).into_drawing_area();
        root.fill(&WHITE).map_err(pe)?;
        let mut chart = ChartBuilder::on(&root)
            .margin(12)
            .x_label_area_size(44)
            .y_label_area_size(70)
            .build_cartesian_2d(xlo..xhi, ylo..yhi)
            .map_err(pe)?;
        chart
            .configure_mesh()
            .disable_mesh()
            .x_label_formatter(&tick)
            .y_label_formatter(&tick)
            .x_desc(axis_label(&xc.0.name, &xc.0.unit))
            .y_desc(axis_label(&yc.0.name, &yc.0.unit))
            .label_style((FONT, 15))
            .axis_desc_style((FONT, 16))
            .draw()
            .map_err(pe)?;
        let is_unknown = |i: usize| {
            roles
                .and_then(|r| r.get(i))
                .is_some_and(|r| r.eq_ignore_ascii_case("unknown"))
        };
        if let Some(band) = slope
            .zip(intercept)
            .and_then(|(m, b)| line_band(xc.1, yc.1, &|i| !is_unknown(i), m, b, xlo, xhi))
        {
            chart
                .draw_series(std::iter::once(Polygon::new(
                    band,
                    SKY_BLUE.mix(0.35).filled(),
                )))
                .map_err(pe)?
                .label("line ± 1 standard error")
                .legend(|(x, y)| {
                    Rectangle::new([(x, y - 4), (x + 18, y + 4)], SKY_BLUE.mix(0.35).filled())
                });
        }
        if let (Some(m), Some(b)) = (slope, intercept) {
            chart
                .draw_series(LineSeries::new(
                    vec![(xlo, m * xlo + b), (xhi, m * xhi + b)],
                    VERMILLION.stroke_width(2),
                ))
                .map_err(pe)?
                .label("fitted line")
                .legend(|(x, y)| {
                    PathElement::new(vec![(x, y), (x + 18, y)], VERMILLION.stroke_width(2))
                });
        }
        let rows = xc.1.len().min(yc.1.len());
        let finite = |i: &usize| xc.1[*i].is_finite() && yc.1[*i].is_finite();
        if let Some(u) = y_unc {
            chart
                .draw_series(
                    (0..rows)
                        .filter(finite)
                        .filter(|i| u[*i].is_finite())
                        .map(|i| {
                            PathElement::new(
                                vec![(xc.1[i], yc.1[i] - u[i]), (xc.1[i], yc.1[i] + u[i])],
                                BLACK_.stroke_width(1),
                            )
                        }),
                )
                .map_err(pe)?;
        }
        chart
            .draw_series(
                (0..rows)
                    .filter(finite)
                    .filter(|i| !is_unknown(*i))
                    .map(|i| Circle::new((xc.1[i], yc.1[i]), 4, BLUE.filled())),
            )
            .map_err(pe)?
            .label("standards")
            .legend(|(x, y)| Circle::new((x + 9, y), 4, BLUE.filled()));
        if roles.is_some() && (0..rows).any(is_unknown) {
            chart
                .draw_series(
                    (0..rows)
                        .filter(finite)
                        .filter(|i| is_unknown(*i))
                        .map(|i| TriangleMarker::new((xc.1[i], yc.1[i]), 6, VERMILLION.filled())),
                )
                .map_err(pe)?
                .label("unknowns")
                .legend(|(x, y)| TriangleMarker::new((x + 9, y), 6, VERMILLION.filled()));
        }
        chart
            .configure_series_labels()
            .position(SeriesLabelPosition::UpperLeft)
            .background_style(WHITE.mix(0.85))
            .border_style(GREY)
            .label_font((FONT, 14))
            .draw()
            .map_err(pe)?;
        root.present().map_err(pe)?;
    }
    Ok(Some(buf))
}

/// The band of a straight line fitted by least squares to the standards, ± one
/// standard error of the line: s·√(1/n + (x − x̄)²/Sxx), with s² the residual
/// variance on n − 2 degrees of freedom (the textbook result for simple linear
/// regression, e.g. N. R. Draper and H. Smith, Applied Regression Analysis, 3rd ed.,
/// Wiley, 1998, chapter 3, cited from memory). Needs three standards or more. The polygon runs
/// along the upper edge and back along the lower one.
fn line_band(
    x: &[f64],
    y: &[f64],
    standard: &dyn Fn(usize) -> bool,
    slope: f64,
    intercept: f64,
    xlo: f64,
    xhi: f64,
) -> Option<Vec<(f64, f64)>> {
    let pts: Vec<(f64, f64)> = (0..x.len().min(y.len()))
        .filter(|&i| standard(i) && x[i].is_finite() && y[i].is_finite())
        .map(|i| (x[i], y[i]))
        .collect();
    let n = pts.len();
    if n < 3 {
        return None;
    }
    let mean = pts.iter().map(|p| p.0).sum::<f64>() / n as f64;
    let sxx: f64 = pts.iter().map(|p| (p.0 - mean).powi(2)).sum();
    let ss: f64 = pts
        .iter()
        .map(|p| (p.1 - slope * p.0 - intercept).powi(2))
        .sum();
    if sxx <= 0.0 {
        return None;
    }
    let s = (ss / (n - 2) as f64).sqrt();
    const STEPS: usize = 40;
    let at = |k: usize| xlo + (xhi - xlo) * k as f64 / STEPS as f64;
    let half = |x: f64| s * (1.0 / n as f64 + (x - mean).powi(2) / sxx).sqrt();
    let upper = (0..=STEPS).map(|k| {
        let x = at(k);
        (x, slope * x + intercept + half(x))
    });
    let lower = (0..=STEPS).rev().map(|k| {
        let x = at(k);
        (x, slope * x + intercept - half(x))
    });
    let band: Vec<(f64, f64)> = upper.chain(lower).collect();
    band.iter().all(|p| p.1.is_finite()).then_some(band)
}

/// A greyscale thumbnail: block means over `f`×`f` pixels, stretched between the
/// 0.5th and 99.5th percentiles to 8 bits. Returns (width, height, samples).
pub fn thumbnail(img: &Image) -> (usize, usize, Vec<u8>) {
    let f = img.width.max(img.height).div_ceil(THUMB_MAX).max(1);
    let (tw, th) = (img.width.div_ceil(f), img.height.div_ceil(f));
    let mut means = vec![f64::NAN; tw * th];
    for ty in 0..th {
        for tx in 0..tw {
            let (mut sum, mut n) = (0.0f64, 0usize);
            for y in ty * f..((ty + 1) * f).min(img.height) {
                for x in tx * f..((tx + 1) * f).min(img.width) {
                    let v = img.data.get(y * img.width + x).copied().unwrap_or(f32::NAN);
                    if v.is_finite() {
                        sum += f64::from(v);
                        n += 1;
                    }
                }
            }
            if n > 0 {
                means[ty * tw + tx] = sum / n as f64;
            }
        }
    }
    let mut sorted: Vec<f64> = means.iter().copied().filter(|v| v.is_finite()).collect();
    sorted.sort_by(f64::total_cmp);
    let pick = |q: f64| {
        sorted
            .get(((sorted.len().saturating_sub(1)) as f64 * q).round() as usize)
            .copied()
            .unwrap_or(0.0)
    };
    let (lo, hi) = (pick(0.005), pick(0.995));
    let span = if hi > lo { hi - lo } else { 1.0 };
    let px = means
        .iter()
        .map(|v| {
            if v.is_finite() {
                (((v - lo) / span).clamp(0.0, 1.0) * 255.0).round() as u8
            } else {
                0
            }
        })
        .collect();
    (tw, th, px)
}

/// Label outlines on a `tw`×`th` grid: nearest-sampled labels, a pixel is drawn
/// where it belongs to an object and a 4-neighbour differs. RGBA samples.
pub fn outline_overlay(labels: &Labels, tw: usize, th: usize) -> Vec<u8> {
    let sample = |tx: usize, ty: usize| -> u32 {
        let x = ((tx as f64 + 0.5) * labels.width as f64 / tw as f64) as usize;
        let y = ((ty as f64 + 0.5) * labels.height as f64 / th as f64) as usize;
        labels
            .labels
            .get(
                y.min(labels.height.saturating_sub(1)) * labels.width
                    + x.min(labels.width.saturating_sub(1)),
            )
            .copied()
            .unwrap_or(0)
    };
    let grid: Vec<u32> = (0..th)
        .flat_map(|y| (0..tw).map(move |x| (x, y)))
        .map(|(x, y)| sample(x, y))
        .collect();
    let mut rgba = vec![0u8; tw * th * 4];
    for y in 0..th {
        for x in 0..tw {
            let l = grid[y * tw + x];
            if l == 0 {
                continue;
            }
            let differs = (x == 0 || grid[y * tw + x - 1] != l)
                || (x + 1 == tw || grid[y * tw + x + 1] != l)
                || (y == 0 || grid[(y - 1) * tw + x] != l)
                || (y + 1 == th || grid[(y + 1) * tw + x] != l);
            if differs {
                let o = (y * tw + x) * 4;
                rgba[o..o + 4].copy_from_slice(&[VERMILLION.0, VERMILLION.1, VERMILLION.2, 255]);
            }
        }
    }
    rgba
}

/// PNG bytes of 8-bit samples (1 = grey, 4 = RGBA channels).
pub fn png_bytes(w: usize, h: usize, channels: usize, data: &[u8]) -> Fig<Vec<u8>> {
    let mut out = Vec::new();
    {
        let mut enc = png::Encoder::new(&mut out, w as u32, h as u32);
        enc.set_color(if channels == 4 {
            png::ColorType::Rgba
        } else {
            png::ColorType::Grayscale
        });
        enc.set_depth(png::BitDepth::Eight);
        let mut writer = enc.write_header().map_err(pe)?;
        writer.write_image_data(data).map_err(pe)?;
        writer.finish().map_err(pe)?;
    }
    Ok(out)
}

/// Standard base64 (RFC 4648, section 4) with padding, for data URIs.
pub fn base64(bytes: &[u8]) -> String {
    const ABC: &[u8; 64] = b"ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789+/";
    let mut s = String::with_capacity(bytes.len().div_ceil(3) * 4);
    for chunk in bytes.chunks(3) {
        let b = [
            chunk[0],
            *chunk.get(1).unwrap_or(&0),
            *chunk.get(2).unwrap_or(&0),
        ];
        let n = (u32::from(b[0]) << 16) | (u32::from(b[1]) << 8) | u32::from(b[2]);
        for i in 0..4 {
            if i <= chunk.len() {
                s.push(ABC[((n >> (18 - 6 * i)) & 63) as usize] as char);
            } else {
                s.push('=');
            }
        }
    }
    s
}

/// A "nice" length (1, 2 or 5 × 10^k) not above `max`.
pub fn nice_length(max: f64) -> f64 {
    if !(max.is_finite() && max > 0.0) {
        return 1.0;
    }
    let e = max.log10().floor();
    let base = 10f64.powf(e);
    [5.0, 2.0, 1.0]
        .into_iter()
        .map(|m| m * base)
        .find(|v| *v <= max)
        .unwrap_or(base)
}

/// A micrograph (or label image alone) as a thumbnail with label outlines and a
/// scale bar from the pixel size ("px" when there is none).
pub fn micrograph_svg(image: Option<&Image>, labels: Option<&Labels>) -> Fig<String> {
    let (w, h, pixel) = match (image, labels) {
        (Some(i), _) => (i.width, i.height, i.pixel_size.clone()),
        (None, Some(l)) => (l.width, l.height, l.pixel_size.clone()),
        (None, None) => return Err("nothing to draw".into()),
    };
    if w == 0 || h == 0 {
        return Err("the image is empty".into());
    }
    let (tw, th, grey) = match image {
        Some(i) => thumbnail(i),
        None => {
            let f = w.max(h).div_ceil(THUMB_MAX).max(1);
            let (tw, th) = (w.div_ceil(f), h.div_ceil(f));
            (tw, th, vec![235u8; tw * th])
        }
    };
    let scale = THUMB_DRAWN / (tw.max(th) as f64);
    let (dw, dh) = (tw as f64 * scale, th as f64 * scale);
    let margin = 10.0;
    let bar_area = 34.0;
    let width = (dw + 2.0 * margin).ceil() as u32;
    let height = (dh + 2.0 * margin + bar_area).ceil() as u32;

    let mut layers = vec![png_bytes(tw, th, 1, &grey)?];
    if let Some(l) = labels {
        layers.push(png_bytes(tw, th, 4, &outline_overlay(l, tw, th))?);
    }

    // Scale bar: about a quarter of the image width, in its unit.
    let (px_w, unit) = match &pixel {
        Some(p) if p.x.is_finite() && p.x > 0.0 => (p.x, p.unit.clone()),
        _ => (1.0, "px".to_string()),
    };
    let physical = w as f64 * px_w;
    let bar = nice_length(physical / 4.0);
    let bar_drawn = bar / physical * dw;

    let mut buf = String::new();
    {
        let root = SVGBackend::with_string(&mut buf, (width, height)).into_drawing_area();
        root.fill(&WHITE).map_err(pe)?;
        draw_scale_bar(
            &root,
            margin,
            margin + dh,
            bar_drawn,
            &format!("{} {unit}", format_plain(bar)),
        )?;
        root.present().map_err(pe)?;
    }
    // Glue: the thumbnail layers go first, under the scale bar.
    let images: String = layers
        .iter()
        .map(|png| {
            format!(
                "<image x=\"{margin}\" y=\"{margin}\" width=\"{dw:.1}\" height=\"{dh:.1}\" \
                 preserveAspectRatio=\"none\" style=\"image-rendering:pixelated\" \
                 href=\"data:image/png;base64,{}\"/>\n",
                base64(png)
            )
        })
        .collect();
    let at = buf.find('\n').map_or(buf.len(), |i| i + 1);
    // The white background rect plotters writes first must stay below the image.
    let at = buf[at..].find('\n').map_or(at, |j| at + j + 1);
    buf.insert_str(at, &images);
    Ok(buf)
}

fn draw_scale_bar(
    root: &DrawingArea<SVGBackend<'_>, Shift>,
    x: f64,
    y: f64,
    length: f64,
    label: &str,
) -> Fig<()> {
    let (x0, y0) = (x.round() as i32, (y + 10.0).round() as i32);
    let x1 = (x + length).round() as i32;
    root.draw(&Rectangle::new(
        [(x0, y0), (x1.max(x0 + 1), y0 + 5)],
        BLACK_.filled(),
    ))
    .map_err(pe)?;
    root.draw(&Text::new(
        label.to_string(),
        (x1 + 8, y0 - 4),
        (FONT, 16).into_font().color(&BLACK_),
    ))
    .map_err(pe)?;
    Ok(())
}
