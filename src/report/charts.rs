//! The report's charts: plotters' SVG (and PNG) line charts and the harmonic profile, and the
//! curves each chart draws, taken from the notebook's typed results.
//!
//! Visual language (our own): each label has a colour (first label copper, second teal, then
//! olive, plum, slate); the left channel is drawn solid, the right dashed; reference lines (1 %
//! THD, 0 dB) are thin grey. Charts are plain white panels that print well.

use crate::analysis::blocks::TrendResult;
use crate::analysis::separation::SeparationResult;
use crate::analysis::square::{SquareFigures, SquareResult};
use crate::analysis::sweep::{HarmonicPoint, ResponseResult};
use crate::analysis::tone::ToneResult;
use crate::error::{Error, Result};
use crate::notebook::Run;
use crate::procedure::power::PowerResult;
use crate::procedure::zout::{ZoutPoint, ZoutResult};
use crate::results::Kept;
use plotters::coord::Shift;
use plotters::prelude::*;
use std::path::Path;

const PALETTE: [RGBColor; 5] = [
    RGBColor(176, 98, 38),  // copper
    RGBColor(31, 111, 139), // teal
    RGBColor(110, 122, 40), // olive
    RGBColor(122, 63, 110), // plum
    RGBColor(80, 90, 100),  // slate
];
const GREY: RGBColor = RGBColor(150, 150, 150);
const SIZE: (u32, u32) = (760, 420);

/// (x, y) pairs of a curve.
type Points = Vec<(f64, f64)>;

/// One curve: a name for the legend, its label's colour, dashed for the right channel.
struct Curve {
    name: String,
    color: RGBColor,
    dashed: bool,
    points: Points,
}

/// DejaVu Sans (Bitstream Vera licence, `assets/fonts/`), for text in PNG charts: the bitmap
/// backend cannot rely on system fonts.
static FONT: &[u8] = include_bytes!("../../assets/fonts/DejaVuSans.ttf");

fn ensure_font() -> Result<()> {
    static ONCE: std::sync::OnceLock<bool> = std::sync::OnceLock::new();
    let ok = *ONCE.get_or_init(|| {
        ["sans-serif", "serif", "monospace"].iter().all(|family| {
            [
                FontStyle::Normal,
                FontStyle::Bold,
                FontStyle::Italic,
                FontStyle::Oblique,
            ]
            .into_iter()
            .all(|style| plotters::style::register_font(family, style, FONT).is_ok())
        })
    });
    if ok {
        Ok(())
    } else {
        Err(Error::Report(
            "the bundled chart font could not be loaded (a damaged build: reinstall ampnote)"
                .into(),
        ))
    }
}

/// Draw a chart as SVG (the value) and, when `png` names a file, as PNG too: the body is expanded
/// once per plotters backend.
macro_rules! render {
    ($png:expr, |$root:ident| $body:expr) => {{
        // Text is measured with the bundled font for both backends.
        ensure_font()?;
        let mut svg = String::new();
        {
            let area = SVGBackend::with_string(&mut svg, SIZE).into_drawing_area();
            let $root = &area;
            $body?;
        }
        if let Some(path) = $png {
            // Whole or not at all: drawn under a temporary name, renamed when complete.
            // (the image format comes from the extension, so it stays last)
            let tmp = path.with_extension("partial.png");
            {
                let area = BitMapBackend::new(&tmp, SIZE).into_drawing_area();
                let $root = &area;
                $body?;
            }
            std::fs::rename(&tmp, path).map_err(|source| Error::Write {
                path: path.to_path_buf(),
                source,
            })?;
        }
        Ok::<String, Error>(svg)
    }};
}

fn draw_err<E: std::fmt::Display>(e: E) -> Error {
    // The plotting library's message nests its own debug text; say what it means instead.
    let text = e.to_string();
    let full = [
        "os error 28",
        "os error 27",
        "No space left",
        "File too large",
    ]
    .iter()
    .any(|k| text.contains(k));
    Error::Report(if full {
        "the disk is full (or a file-size limit was reached) while writing a chart. Free some space and run `ampnote report` again; the notebook itself is untouched.".into()
    } else {
        "a chart could not be drawn or written. Check that the report folder is writable and run `ampnote report` again; the notebook itself is untouched.".into()
    })
}

/// What a line chart shows.
#[derive(Clone, Copy)]
struct LineSpec<'a> {
    title: &'a str,
    x_desc: &'a str,
    y_desc: &'a str,
    curves: &'a [Curve],
    log_x: bool,
    log_y: bool,
    /// A reference level, drawn as a dashed dark red line, labelled (`1 % THD`).
    hline: Option<f64>,
    hline_label: &'a str,
    /// Mark where each curve crosses the reference level (the 1 % points of THD against power).
    mark_crossings: bool,
    /// Text at data coordinates (harmonic labels on a spectrum).
    notes: &'a [(f64, f64, String)],
}

/// A line chart as SVG (and PNG when `png` names a file); empty when no curve has a point.
fn line_chart(spec: &LineSpec, png: Option<&Path>) -> Result<String> {
    let LineSpec {
        curves,
        log_x,
        log_y,
        hline,
        ..
    } = *spec;
    let pts = curves.iter().flat_map(|c| c.points.iter()).filter(|p| {
        p.0.is_finite() && p.1.is_finite() && (!log_x || p.0 > 0.0) && (!log_y || p.1 > 0.0)
    });
    let (mut x0, mut x1, mut y0, mut y1) = (
        f64::INFINITY,
        f64::NEG_INFINITY,
        f64::INFINITY,
        f64::NEG_INFINITY,
    );
    for &(x, y) in pts {
        x0 = x0.min(x);
        x1 = x1.max(x);
        y0 = y0.min(y);
        y1 = y1.max(y);
    }
    if !x0.is_finite() {
        return Ok(String::new());
    }
    if let Some(h) = hline {
        y0 = y0.min(h);
        y1 = y1.max(h);
    }
    let (y0, y1) = if log_y {
        (y0 / 1.5, y1 * 1.5)
    } else {
        let m = ((y1 - y0) * 0.08).max(0.5);
        (y0 - m, y1 + m)
    };
    let ranges = (x0, x1, y0, y1);
    render!(png, |root| draw_lines(root, spec, ranges))
}

/// The body of every line chart, on any plotters backend.
fn draw_lines<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    spec: &LineSpec,
    (x0, x1, y0, y1): (f64, f64, f64, f64),
) -> Result<()> {
    let LineSpec {
        title,
        x_desc,
        y_desc,
        curves,
        log_x,
        log_y,
        hline,
        hline_label,
        mark_crossings,
        notes,
    } = *spec;
    root.fill(&WHITE).map_err(draw_err)?;
    // The legend goes under the plotting area, never over the data: two entries per row.
    let rows = curves.len().div_ceil(2) as u32;
    let legend_h = if curves.is_empty() { 0 } else { rows * 20 + 12 };
    let (plot, legend) = root.split_vertically(SIZE.1 - legend_h);
    let mut b = ChartBuilder::on(&plot);
    b.caption(title, ("sans-serif", 18))
        .margin(12)
        .x_label_area_size(42)
        .y_label_area_size(60);
    macro_rules! body {
        ($chart:expr) => {{
            let mut chart = $chart;
            chart
                .configure_mesh()
                .x_desc(x_desc)
                .y_desc(y_desc)
                .x_label_formatter(&|v| tick(*v))
                .y_label_formatter(&|v| tick(*v))
                .light_line_style(RGBColor(235, 235, 235))
                .draw()
                .map_err(draw_err)?;
            if let Some(h) = hline {
                chart
                    .draw_series(DashedLineSeries::new(
                        vec![(x0, h), (x1, h)],
                        6,
                        4,
                        REFERENCE.stroke_width(2),
                    ))
                    .map_err(draw_err)?;
                if !hline_label.is_empty() {
                    chart
                        .draw_series(std::iter::once(Text::new(
                            hline_label.to_string(),
                            // Just above the line (the text hangs below its anchor).
                            (
                                x0,
                                if log_y {
                                    h * 1.45
                                } else {
                                    h + 0.05 * (y1 - y0)
                                },
                            ),
                            ("sans-serif", 13).into_font().color(&REFERENCE),
                        )))
                        .map_err(draw_err)?;
                }
                if mark_crossings {
                    let marks: Vec<(f64, f64, RGBColor)> = curves
                        .iter()
                        .filter_map(|c| {
                            crossing(&c.points, h, log_x, log_y).map(|x| (x, h, c.color))
                        })
                        .collect();
                    chart
                        .draw_series(
                            marks
                                .into_iter()
                                .map(|(x, y, color)| Circle::new((x, y), 5, color.stroke_width(2))),
                        )
                        .map_err(draw_err)?;
                }
            }
            for c in curves {
                let style = c.color.stroke_width(2);
                // A point that is not finite breaks the line (a stretch left out is not
                // bridged, so nothing is drawn where nothing was read).
                let pieces: Vec<Vec<(f64, f64)>> = c
                    .points
                    .split(|p| !(p.0.is_finite() && p.1.is_finite()))
                    .filter(|piece| !piece.is_empty())
                    .map(<[(f64, f64)]>::to_vec)
                    .collect();
                for (k, pts) in pieces.into_iter().enumerate() {
                    if c.dashed {
                        let drawn = chart
                            .draw_series(DashedLineSeries::new(pts, 7, 5, style))
                            .map_err(draw_err)?;
                        if k == 0 {
                            drawn.label(c.name.clone()).legend(move |(x, y)| {
                                EmptyElement::at((x, y))
                                    + PathElement::new(vec![(0, 0), (8, 0)], style)
                                    + PathElement::new(vec![(13, 0), (22, 0)], style)
                            });
                        }
                    } else {
                        let drawn = chart
                            .draw_series(LineSeries::new(pts, style))
                            .map_err(draw_err)?;
                        if k == 0 {
                            drawn.label(c.name.clone()).legend(move |(x, y)| {
                                PathElement::new(vec![(x, y), (x + 22, y)], style)
                            });
                        }
                    }
                }
            }
            chart
                .draw_series(notes.iter().map(|(x, y, t)| {
                    Text::new(
                        t.clone(),
                        (*x, *y),
                        ("sans-serif", 13).into_font().color(&BLACK),
                    )
                }))
                .map_err(draw_err)?;
        }};
    }
    match (log_x, log_y) {
        (true, true) => body!(b
            .build_cartesian_2d((x0..x1).log_scale(), (y0..y1).log_scale())
            .map_err(draw_err)?),
        (true, false) => body!(b
            .build_cartesian_2d((x0..x1).log_scale(), y0..y1)
            .map_err(draw_err)?),
        (false, true) => body!(b
            .build_cartesian_2d(x0..x1, (y0..y1).log_scale())
            .map_err(draw_err)?),
        (false, false) => body!(b.build_cartesian_2d(x0..x1, y0..y1).map_err(draw_err)?),
    }
    // The legend strip: a sample of each line and its name.
    let col_w = (SIZE.0 as i32 - 80) / 2;
    for (i, c) in curves.iter().enumerate() {
        let (x, y) = (70 + (i as i32 % 2) * col_w, 10 + (i as i32 / 2) * 20);
        let style = c.color.stroke_width(2);
        if c.dashed {
            legend
                .draw(&PathElement::new(vec![(x, y), (x + 9, y)], style))
                .map_err(draw_err)?;
            legend
                .draw(&PathElement::new(vec![(x + 14, y), (x + 24, y)], style))
                .map_err(draw_err)?;
        } else {
            legend
                .draw(&PathElement::new(vec![(x, y), (x + 24, y)], style))
                .map_err(draw_err)?;
        }
        legend
            .draw(&Text::new(
                c.name.clone(),
                (x + 32, y - 7),
                ("sans-serif", 13).into_font().color(&BLACK),
            ))
            .map_err(draw_err)?;
    }
    root.present().map_err(draw_err)?;
    Ok(())
}

/// The part of a sweep's curve that is the amplifier's: the sweep's first and last twentieth of
/// an octave (our choice) hold its fade-in and the anti-alias filter's edge, which are not the
/// amplifier's response (left out, not drawn as data).
fn swept(r: &ResponseResult, points: impl Iterator<Item = (f64, f64)>) -> Points {
    let (Some(lo), Some(hi)) = (
        r.points.first().map(|p| p.frequency_hz),
        r.points.last().map(|p| p.frequency_hz),
    ) else {
        return Vec::new();
    };
    inside(lo, hi, points)
}

/// The points of a swept curve from `lo` to `hi` Hz without its first and last twentieth of an
/// octave (see [`swept`]).
fn inside(lo: f64, hi: f64, points: impl Iterator<Item = (f64, f64)>) -> Points {
    let edge = 2f64.powf(1.0 / 20.0);
    points
        .filter(|(f, _)| *f >= lo * edge && *f <= hi / edge)
        .collect()
}

/// A harmonic's (or THD's) curve against the excitation frequency, broken where the analysis
/// marked points as hum-limited (there the hum, not the harmonic, is read; see
/// [`crate::analysis::sweep::HarmonicPoint::hum_limited`]). The analysis already stops each
/// curve short of the sweep's top.
fn harmonic_curve(r: &ResponseResult, points: &[HarmonicPoint]) -> Points {
    swept(
        r,
        points.iter().map(|p| {
            (
                p.frequency_hz,
                if p.hum_limited { f64::NAN } else { p.level_dbc },
            )
        }),
    )
}

/// A run's lowest square.
fn lowest_square(s: &[SquareFigures]) -> Option<&SquareFigures> {
    s.iter()
        .min_by(|a, b| a.frequency_hz.total_cmp(&b.frequency_hz))
}

/// A run's highest square, when it has more than one (else the lowest chart shows it).
fn highest_square(s: &[SquareFigures]) -> Option<&SquareFigures> {
    s.iter()
        .max_by(|a, b| a.frequency_hz.total_cmp(&b.frequency_hz))
        .filter(|_| s.len() > 1)
}

/// The reference line's colour (dark red: it must not read as grid).
const REFERENCE: RGBColor = RGBColor(160, 30, 30);

/// An axis label as a person writes it: 20, 100, 1k, 10k, 0.1; never `10000.0` or `-0.0`.
fn tick(v: f64) -> String {
    let trim = |s: String| {
        if s.contains('.') {
            s.trim_end_matches('0').trim_end_matches('.').to_string()
        } else {
            s
        }
    };
    let v = if v.abs() < 1e-9 { 0.0 } else { v };
    if v.abs() >= 1000.0 {
        format!("{}k", trim(format!("{:.1}", v / 1000.0)))
    } else if v.abs() >= 10.0 || v == 0.0 {
        trim(format!("{v:.1}"))
    } else {
        trim(crate::report::number::significant(v, 2, 4))
    }
}

/// Where `points` (x ascending) first cross `level` going up, interpolated on the chart's
/// scales (log-log for THD against power).
fn crossing(points: &[(f64, f64)], level: f64, log_x: bool, log_y: bool) -> Option<f64> {
    let (fx, fy) = (
        |x: f64| if log_x { x.ln() } else { x },
        |y: f64| if log_y { y.ln() } else { y },
    );
    let pair = points
        .windows(2)
        .find(|w| w[0].1 < level && w[1].1 >= level && w[0].0 > 0.0 && w[1].0 > 0.0)?;
    let (a, b) = (pair[0], pair[1]);
    let t = (fy(level) - fy(a.1)) / (fy(b.1) - fy(a.1));
    let x = fx(a.0) + t * (fx(b.0) - fx(a.0));
    Some(if log_x { x.exp() } else { x })
}

/// Labels in the order their first run was made.
fn labels(runs: &[Run]) -> Vec<String> {
    let mut out: Vec<String> = Vec::new();
    for r in runs {
        if !out.contains(&r.meta.label) {
            out.push(r.meta.label.clone());
        }
    }
    out
}

/// One curve per run holding a `T`, its points taken by `f`.
fn curves_for<T: Kept>(runs: &[Run], f: impl Fn(&T) -> Vec<(f64, f64)>) -> Vec<Curve> {
    let labels = labels(runs);
    runs.iter()
        .filter_map(|r| T::of(&r.result).map(|t| (r, t)))
        .map(|(r, t)| {
            let li = labels.iter().position(|l| *l == r.meta.label).unwrap_or(0);
            Curve {
                name: format!(
                    "{}, {}",
                    crate::notebook::printable(&r.meta.label),
                    if r.meta.channel == 1 {
                        "left".to_string()
                    } else if r.meta.channel == 2 {
                        "right".to_string()
                    } else {
                        format!("ch{}", r.meta.channel)
                    }
                ),
                color: PALETTE[li % PALETTE.len()],
                dashed: r.meta.channel % 2 == 0,
                points: f(t),
            }
        })
        .filter(|c| c.points.iter().any(|p| p.0.is_finite() && p.1.is_finite()))
        .collect()
}

/// Bars of the harmonic profile (H2..H7 in dBc) of every tone run, grouped by order.
fn profile_chart(runs: &[Run], png: Option<&Path>) -> Result<String> {
    let tones: Vec<(&Run, &ToneResult)> = runs
        .iter()
        .filter_map(|r| ToneResult::of(&r.result).map(|t| (r, t)))
        .collect();
    if tones.is_empty() {
        return Ok(String::new());
    }
    let labels = labels(runs);
    let orders: Vec<u64> = (2..=7).collect();
    render!(png, |root| draw_profile(root, &tones, &labels, &orders))
}

fn draw_profile<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    tones: &[(&Run, &ToneResult)],
    labels: &[String],
    orders: &[u64],
) -> Result<()> {
    root.fill(&WHITE).map_err(draw_err)?;
    let mut chart = ChartBuilder::on(root)
        .caption("Harmonic profile of the tone runs", ("sans-serif", 18))
        .margin(12)
        .x_label_area_size(42)
        .y_label_area_size(60)
        .build_cartesian_2d(1.5f64..7.5f64, -140f64..0f64)
        .map_err(draw_err)?;
    chart
        .configure_mesh()
        .x_desc("Harmonic order")
        .y_desc("Level (dBc)")
        .x_labels(6)
        .x_label_formatter(&|x| format!("H{}", x.round()))
        .light_line_style(RGBColor(235, 235, 235))
        .draw()
        .map_err(draw_err)?;
    let w = 0.8 / tones.len() as f64;
    for (i, (r, t)) in tones.iter().enumerate() {
        let li = labels.iter().position(|l| *l == r.meta.label).unwrap_or(0);
        let color = PALETTE[li % PALETTE.len()];
        let fill = if r.meta.channel % 2 == 0 {
            color.mix(0.45).filled()
        } else {
            color.filled()
        };
        let bars: Vec<Rectangle<(f64, f64)>> = orders
            .iter()
            .filter_map(|&o| {
                let h = t.harmonics.iter().find(|h| h.order as u64 == o)?;
                let level = h.level_dbc.max(-140.0);
                let x = o as f64 - 0.4 + i as f64 * w;
                Some(Rectangle::new([(x, -140.0), (x + w * 0.9, level)], fill))
            })
            .collect();
        chart
            .draw_series(bars)
            .map_err(draw_err)?
            .label(format!(
                "{}, ch{}",
                crate::notebook::printable(&r.meta.label),
                r.meta.channel
            ))
            .legend(move |(x, y)| Rectangle::new([(x, y - 5), (x + 14, y + 5)], fill));
    }
    chart
        .configure_series_labels()
        .background_style(WHITE.mix(0.85))
        .border_style(GREY)
        .position(SeriesLabelPosition::UpperRight)
        .draw()
        .map_err(draw_err)?;
    root.present().map_err(draw_err)?;
    Ok(())
}

/// Every chart of the report: (file stem, caption, SVG), an empty SVG where no run has data for
/// it. Each is also written as PNG under `out/charts/`. `deviation` is B minus A of the first two
/// labels' responses, per channel.
pub(crate) fn build(
    runs: &[Run],
    deviation: &[crate::report::compare::DeviationCurve],
    tones: &[crate::report::model::ToneChart],
    out: &Path,
) -> Result<Vec<(&'static str, &'static str, String)>> {
    let labels = labels(runs);
    let deviation: Vec<Curve> = deviation
        .iter()
        .map(|d| Curve {
            name: format!(
                "{} minus {}, {}",
                crate::notebook::printable(labels.get(1).map_or("", |s| s.as_str())),
                crate::notebook::printable(labels.first().map_or("", |s| s.as_str())),
                if d.channel == 1 { "left" } else { "right" }
            ),
            color: PALETTE[1],
            dashed: d.channel % 2 == 0,
            points: d.points.iter().map(|p| (p[0], p[1])).collect(),
        })
        .collect();
    let power = curves_for(runs, |p: &PowerResult| {
        p.steps
            .iter()
            .filter(|s| !s.excluded)
            .filter_map(|s| Some((s.output_w?, s.thd_percent?)))
            .collect()
    });
    let response = curves_for(runs, |r: &ResponseResult| {
        swept(r, r.points.iter().map(|p| (p.frequency_hz, p.magnitude_db)))
    });
    let phase = curves_for(runs, |r: &ResponseResult| {
        swept(r, r.points.iter().map(|p| (p.frequency_hz, p.phase_deg)))
    });
    let h2 = curves_for(runs, |r: &ResponseResult| {
        r.harmonics
            .iter()
            .find(|h| h.order == 2)
            .map_or(Vec::new(), |h| harmonic_curve(r, &h.points))
    });
    let thd_f = curves_for(runs, |r: &ResponseResult| harmonic_curve(r, &r.thd));
    let trend = |f: fn(&crate::analysis::blocks::TrendPoint) -> Option<f64>| {
        curves_for(runs, move |t: &TrendResult| {
            t.points
                .iter()
                .filter_map(|p| Some((p.at_s, f(p)?)))
                .collect()
        })
    };
    let trend_level = trend(|p| p.level_dbfs);
    // Separation: the first undriven channel of each run; the line broken where points sit
    // under the channel's own floor (lower bounds, not readings).
    let separation = curves_for(runs, |s: &SeparationResult| {
        s.channels.first().map_or(Vec::new(), |c| {
            c.points
                .iter()
                .map(|p| {
                    let v = if p.limited_by.is_some() {
                        f64::NAN
                    } else {
                        p.separation_db
                    };
                    (p.frequency_hz, v)
                })
                .collect()
        })
    });
    let trend_thd = trend(|p| p.thd_percent.or(p.thdn_percent));
    // One period of each square run's lowest and highest square, the rising edge in the middle;
    // one pick serves the curves and the chart's title.
    let square_at = |pick: fn(&[SquareFigures]) -> Option<&SquareFigures>| {
        let curves = curves_for(runs, move |q: &SquareResult| {
            pick(&q.squares).map_or(Vec::new(), |f| {
                let half = 0.5e6 / f.frequency_hz;
                f.trace.iter().map(|&(t, v)| (t / half, v)).collect()
            })
        });
        let title = runs
            .iter()
            .find_map(|r| SquareResult::of(&r.result).and_then(|q| pick(&q.squares)))
            .map_or("Square wave".to_string(), |f| {
                format!(
                    "Square wave at {} (one period, rising edge at 0)",
                    crate::report::number::show(f.frequency_hz, crate::report::number::Unit::Hz)
                )
            });
        (curves, title)
    };
    let (square_low, low_title) = square_at(lowest_square);
    let (square_high, high_title) = square_at(highest_square);
    // Output impedance across the band (sweep runs), and its phase where it was measured.
    let zout_curve = |z: &ZoutResult, y: fn(&ZoutPoint) -> Option<f64>| match (
        z.points.first(),
        z.points.last(),
    ) {
        (Some(a), Some(b)) => inside(
            a.frequency_hz,
            b.frequency_hz,
            z.points
                .iter()
                .filter_map(|p| Some((p.frequency_hz, y(p)?))),
        ),
        _ => Vec::new(),
    };
    let zout = curves_for(runs, |z: &ZoutResult| zout_curve(z, |p| Some(p.zout_ohms)));
    let zout_phase = curves_for(runs, |z: &ZoutResult| zout_curve(z, |p| p.phase_deg));
    // Spectrum and residual of each label's left-channel tone run (the latest).
    let mut spectra = Vec::new();
    let mut residuals = Vec::new();
    let mut notes = Vec::new();
    for tone in tones {
        let Some(li) = labels.iter().position(|l| *l == tone.label) else {
            continue;
        };
        let label = &tone.label;
        let color = PALETTE[li % PALETTE.len()];
        if li == 0 {
            let (f0, level) = (tone.fundamental_hz, tone.fundamental_dbfs);
            for &(order, dbc) in tone.harmonics.iter().take(4) {
                notes.push((
                    order as f64 * f0 * 1.03,
                    level + dbc + 4.0,
                    format!("H{order}"),
                ));
            }
            notes.push((f0 * 1.03, level + 4.0, "fundamental".to_string()));
        }
        spectra.push(Curve {
            name: format!("{}, left", crate::notebook::printable(label)),
            color,
            dashed: false,
            points: tone.views.spectrum.clone(),
        });
        residuals.push(Curve {
            name: format!("{}, left", crate::notebook::printable(label)),
            color,
            dashed: false,
            points: tone.views.residual.clone(),
        });
    }
    let png = |file: &str| out.join("charts").join(format!("{file}.png"));
    // A chart's SVG (and its PNG beside it); the spec's notes default to none.
    let chart = |file: &str, spec: LineSpec| line_chart(&spec, Some(&png(file)));
    let spec = |title, x_desc, y_desc, curves, log_x, log_y, hline: Option<f64>| LineSpec {
        title,
        x_desc,
        y_desc,
        curves,
        log_x,
        log_y,
        hline,
        hline_label: "",
        mark_crossings: false,
        notes: &[],
    };
    let charts = [
        (
            "thd-vs-power",
            "THD against output power",
            chart(
                "thd-vs-power",
                LineSpec {
                    hline_label: " 1 % THD",
                    mark_crossings: true,
                    ..spec(
                        "THD against output power (circles: the 1 % points)",
                        "Output power (W)",
                        "THD (%)",
                        &power,
                        true,
                        true,
                        Some(1.0),
                    )
                },
            )?,
        ),
        (
            "response-magnitude",
            "Frequency response",
            chart(
                "response-magnitude",
                spec(
                    "Frequency response (re 1 kHz)",
                    "Frequency (Hz)",
                    "Magnitude (dB)",
                    &response,
                    true,
                    false,
                    Some(0.0),
                ),
            )?,
        ),
        (
            "response-phase",
            "Phase",
            chart(
                "response-phase",
                spec(
                    "Phase (latency removed)",
                    "Frequency (Hz)",
                    "Phase (degrees)",
                    &phase,
                    true,
                    false,
                    None,
                ),
            )?,
        ),
        (
            "h2-vs-frequency",
            "Second harmonic against frequency",
            chart(
                "h2-vs-frequency",
                spec(
                    "Second harmonic against frequency (sweep; points the hum can move left out)",
                    "Frequency (Hz)",
                    "H2 (dBc)",
                    &h2,
                    true,
                    false,
                    None,
                ),
            )?,
        ),
        (
            "thd-vs-frequency",
            "THD against frequency",
            chart(
                "thd-vs-frequency",
                spec(
                    "THD against frequency (sweep, H2-H5; points the hum can move left out)",
                    "Frequency (Hz)",
                    "THD (dBc)",
                    &thd_f,
                    true,
                    false,
                    None,
                ),
            )?,
        ),
        (
            "separation",
            "Channel separation",
            chart(
                "separation",
                spec(
                    "Channel separation (gaps: under the channel's own hum or noise)",
                    "Frequency (Hz)",
                    "Separation (dB)",
                    &separation,
                    true,
                    false,
                    Some(60.0),
                ),
            )?,
        ),
        (
            "square-low",
            "Square wave, low frequency",
            chart(
                "square-low",
                spec(
                    &low_title,
                    "Time (half periods from the rising edge)",
                    "Level (half steps)",
                    &square_low,
                    false,
                    false,
                    None,
                ),
            )?,
        ),
        (
            "square-high",
            "Square wave, high frequency",
            chart(
                "square-high",
                spec(
                    &high_title,
                    "Time (half periods from the rising edge)",
                    "Level (half steps)",
                    &square_high,
                    false,
                    false,
                    None,
                ),
            )?,
        ),
        (
            "zout",
            "Output impedance",
            chart(
                "zout",
                spec(
                    "Output impedance against frequency (two-load method)",
                    "Frequency (Hz)",
                    "|Z| (ohm)",
                    &zout,
                    true,
                    false,
                    None,
                ),
            )?,
        ),
        (
            "zout-phase",
            "Output impedance phase",
            chart(
                "zout-phase",
                spec(
                    "Phase of the output impedance (positive: inductive)",
                    "Frequency (Hz)",
                    "Phase (degrees)",
                    &zout_phase,
                    true,
                    false,
                    None,
                ),
            )?,
        ),
        (
            "trend-level",
            "Level over time",
            chart(
                "trend-level",
                spec(
                    "Level over time (trend)",
                    "Time (s)",
                    "Level (dBFS)",
                    &trend_level,
                    false,
                    false,
                    None,
                ),
            )?,
        ),
        (
            "trend-thd",
            "THD over time",
            chart(
                "trend-thd",
                spec(
                    "THD over time (trend; THD+N where THD is under the noise)",
                    "Time (s)",
                    "THD (%)",
                    &trend_thd,
                    false,
                    true,
                    None,
                ),
            )?,
        ),
        (
            "harmonic-profile",
            "Harmonic profile",
            profile_chart(runs, Some(&png("harmonic-profile")))?,
        ),
        (
            "response-change",
            "Response change (after minus before)",
            chart(
                "response-change",
                spec(
                    "Response change, after minus before",
                    "Frequency (Hz)",
                    "Change (dB)",
                    &deviation,
                    true,
                    false,
                    Some(0.0),
                ),
            )?,
        ),
        (
            "spectrum",
            "Spectrum of the tone (left channel)",
            chart(
                "spectrum",
                LineSpec {
                    notes: &notes,
                    ..spec(
                        "Spectrum of the tone, left channel (peak per slice)",
                        "Frequency (Hz)",
                        "Level (dBFS)",
                        &spectra,
                        true,
                        false,
                        None,
                    )
                },
            )?,
        ),
        (
            "residual",
            "Distortion residual over one period",
            chart(
                "residual",
                spec(
                    "Distortion residual over one period of the fundamental",
                    "Phase of the fundamental (degrees)",
                    "Residual (% of the fundamental's peak)",
                    &residuals,
                    false,
                    false,
                    Some(0.0),
                ),
            )?,
        ),
    ];
    Ok(charts.into_iter().collect())
}
