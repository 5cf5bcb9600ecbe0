//! The notebook report: one self-contained HTML page (inline SVG charts, no external assets) plus
//! each chart as its own SVG and PNG file.
//!
//! The page is the typed [`ReportModel`] rendered through maud's `html!` template: maud escapes
//! every interpolated string (labels, notes and settings are the user's text) and checks the
//! markup at compile time, which hand-written `write!` calls did not (why maud over askama: the
//! template stays Rust, next to the model's types, with no template files to ship).
//!
//! Visual language (our own): each label has a colour (first label copper, second teal, then
//! olive, plum, slate); the left channel is drawn solid, the right dashed; a better change is
//! marked with an up-pointing word "better" in teal, a worse one "worse" in red, both also in
//! words so the page reads in black and white.

use super::compare::Verdict;
use super::model::ReportModel;
use crate::error::Result;
use crate::notebook::Notebook;
use maud::{html, Markup, PreEscaped, DOCTYPE};
use std::path::{Path, PathBuf};

/// What the report wrote.
pub struct ReportFiles {
    pub html: PathBuf,
    pub charts: Vec<PathBuf>,
}

/// Screen and print: A4 or Letter (the printer's paper; margins fit both), table headers repeated
/// on each page, no heading left alone at the foot of a page, text no smaller than 9 pt.
const STYLE: &str = "
body{font-family:sans-serif;max-width:900px;margin:2em auto;color:#222;line-height:1.4;font-size:15px}
h1{font-size:1.5em;border-bottom:3px solid #b06226;padding-bottom:.2em}
h2{font-size:1.2em;margin-top:1.8em;break-after:avoid;page-break-after:avoid}
h3{font-size:1.05em;break-after:avoid;page-break-after:avoid}
table{border-collapse:collapse;font-size:.92em;margin:.4em 0 1em}
td,th{border:1px solid #ccc;padding:.25em .55em;text-align:left;vertical-align:top}
th{background:#f4f1ec} thead{display:table-header-group} tr{break-inside:avoid;page-break-inside:avoid}
td.num{text-align:right;white-space:nowrap}
.better{color:#1f6f8b;font-weight:bold} .worse{color:#b00020;font-weight:bold} .same{color:#555}
.pass{color:#1f6f8b;font-weight:bold} .fail{color:#b00020;font-weight:bold}
.warn{color:#8a4b00;font-size:.9em;margin:.1em 0} .code{font-family:monospace;font-size:.85em;color:#666}
figure{margin:1em 0;break-inside:avoid;page-break-inside:avoid} figcaption{font-size:.9em;color:#444}
.note{color:#555;font-size:.9em}
@page{margin:14mm}
@media print{body{max-width:none;margin:0;font-size:10pt} figure svg{max-width:100%;height:auto}}
";

fn verdict(v: Verdict) -> Markup {
    match v {
        Verdict::Better => html! { span.better { "better" } },
        Verdict::Worse => html! { span.worse { "worse" } },
        Verdict::Same => html! { span.same { "no change" } },
        Verdict::Unknown => html! {},
    }
}

/// Every line of a comparison, its two sides headed `heads` (first, second, change), with the
/// better/worse mark when `verdicts` (a prediction against a measurement has none: neither side
/// is the better one), then the comparison's warnings.
fn comparison_table(
    c: &crate::report::compare::Comparison,
    heads: [&str; 3],
    verdicts: bool,
) -> Markup {
    html! {
        table {
            thead { tr { th { "Channel" } th { "Figure" } th { (heads[0]) } th { (heads[1]) } th { (heads[2]) } } }
            tbody {
                @for l in &c.lines {
                    @let (a, b) = super::model::shown_sides(l);
                    tr {
                        td { (l.channel) }
                        td { (l.figure) }
                        td.num { (a) }
                        td.num { (b) }
                        td {
                            @if verdicts {
                                (l.change) " " (verdict(l.verdict()))
                            } @else if let (None, Some(at_least)) = (l.delta, l.at_least_change) {
                                // Before/after words ("now under the noise") do not fit a
                                // prediction set against a measurement: say the bound plainly.
                                (crate::report::number::change(at_least, l.delta_unit))
                                @if at_least < 0.0 { " or more down" } @else { " or more up" }
                                " (one side is a bound)"
                            } @else {
                                (l.change)
                            }
                        }
                    }
                }
            }
        }
        @for w in &c.warnings { p.warn { (crate::notebook::printable(&w.message)) } }
    }
}

fn channel_name(ch: usize) -> String {
    match ch {
        1 => "left (1)".into(),
        2 => "right (2)".into(),
        n => format!("channel {n}"),
    }
}

/// The page.
fn page(m: &ReportModel, charts: &[(&str, &str, String)]) -> Markup {
    let title = format!("ampnote report: {}", m.amplifier);
    html! {
        (DOCTYPE)
        html lang="en" {
            head {
                meta charset="utf-8";
                title { (title) }
                style { (PreEscaped(STYLE)) }
            }
            body {
                h1 { (title) }
                p.note {
                    "Notebook " (m.notebook) ": " (m.run_count) " run(s), " (m.channels)
                    " channel(s), " (m.warning_count()) " warning(s). Written by ampnote "
                    (m.version) " on " (m.written) "."
                }
                @if m.run_count == 0 {
                    p {
                        "This notebook has no runs yet. Measure something first, for example "
                        code { "ampnote analyze CAPTURE.wav --notebook DIR --label stock" }
                        ", or run " code { "ampnote demo" } " to see a filled notebook."
                    }
                }
                @if let Some(s) = &m.summary {
                    h2 { "Summary: " (s.a) " → " (s.b) }
                    table {
                        thead {
                            tr {
                                th { "Figure" }
                                @for ch in &s.channels { th { (channel_name(*ch)) } }
                            }
                        }
                        tbody {
                            @for row in &s.rows {
                                tr {
                                    td { (row.figure) }
                                    @for cell in &row.cells {
                                        @match cell {
                                            Some(c) => td {
                                                (c.a) " → " (c.b) br;
                                                span.note { (c.change) } " " (verdict(c.verdict))
                                            },
                                            None => td { "-" },
                                        }
                                    }
                                }
                            }
                        }
                    }
                    p.note {
                        "Better or worse follows each figure's direction (more power, less distortion, \
                         noise and output impedance, a wider band); changes under 0.1 dB, or 2 % of a \
                         frequency or impedance, read as no change. A figure under the noise on either \
                         side gives no change (shown as < limit)."
                    }
                }
                @if !m.predictions.is_empty() {
                    h2 { "Predicted against measured" }
                    p.note {
                        "A predicted label's runs come from the circuit rig: ngspice run on the \
                         netlist, not a measurement. Its noise and hum are only what the netlist's \
                         own sources make. Difference: measured minus predicted."
                    }
                    @for p in &m.predictions {
                        @match &p.comparison {
                            Some(c) => {
                                h3 { (p.predicted) " against " (crate::notebook::printable(&c.b)) }
                                (comparison_table(c, ["Predicted", "Measured", "Difference"], false))
                            }
                            None => {
                                h3 { (p.predicted) }
                                p.note {
                                    "No measured label of the same name yet (the same label without the \
                                     word \"predicted\"): measure it to set the prediction against it."
                                }
                            }
                        }
                    }
                }
                @if !m.matches.is_empty() {
                    h2 { "Channel match" }
                    @for (label, r) in &m.matches {
                        h3 {
                            (label) ": "
                            @if r.pass { span.pass { "channels match" } } @else { span.fail { "channels differ" } }
                        }
                        table {
                            thead { tr { th { "Check" } th { "Value" } th { "Tolerance" } th { "" } } }
                            tbody {
                                @for c in &r.checks {
                                    tr {
                                        td { (c.name) }
                                        td.num { (super::number::show(c.value, c.unit)) }
                                        td { (c.limit_text()) }
                                        td { @if c.pass { span.pass { "pass" } } @else { span.fail { "FAIL" } } }
                                    }
                                }
                            }
                        }
                        @for w in &r.warnings { p.warn { (crate::notebook::printable(&w.message)) } }
                    }
                }
                @if !m.benches.is_empty() {
                    h2 { "The bench" }
                    @for b in &m.benches {
                        h3 { (b.label) " (" (b.runs) " run(s))" }
                        table {
                            tbody {
                                @for c in &b.calibration { tr { th { "Calibration" } td { (c) } } }
                                @for (k, v) in &b.settings { tr { th { (k) } td { (v) } } }
                                @for n in &b.notes { tr { th { "Note" } td { (n) } } }
                            }
                        }
                    }
                }
                @if m.run_count > 0 {
                    h2 { "Runs, their figures and warnings" }
                    table {
                        thead {
                            tr { th { "Run" } th { "Label" } th { "Channel" } th { "What" } th { "Figure, and what to know about it" } }
                        }
                        tbody {
                            @for r in &m.runs {
                                tr {
                                    td { (r.id) br; span.note { (r.time) } }
                                    td { (r.label) }
                                    td { (r.channel) }
                                    td { (r.procedure) @if r.predicted { br; span.note { "predicted" } } }
                                    td {
                                        (r.figure)
                                        @for w in &r.warnings {
                                            p.warn { "warning: " (w.message) " " span.code { "[" (w.code.name()) "]" } }
                                        }
                                    }
                                }
                            }
                        }
                    }
                }
                @let drawn: Vec<&(&str, &str, String)> = charts.iter().filter(|c| !c.2.is_empty()).collect();
                @if !drawn.is_empty() {
                    h2 { "Charts" }
                    p.note { "Colour: label; solid: left channel, dashed (or paler): right channel." }
                    @for (file, caption, svg) in drawn {
                        figure id=(file) { (PreEscaped(svg)) figcaption { (caption) } }
                    }
                }
                @if let Some(c) = &m.comparison {
                    h2 { "Every compared figure: " (c.a) " → " (c.b) }
                    (comparison_table(c, ["Before", "After", "Change"], true))
                }
                p.note {
                    "Measurements of amplifiers involve lethal voltages inside tube equipment; \
                     see the README's safety section and follow local codes and licensed practice."
                }
            }
        }
    }
}

/// Write the report of `nb` into `out`.
pub fn write_report(nb: &Notebook, out: &Path) -> Result<ReportFiles> {
    let runs = nb.runs()?;
    let model = ReportModel::build(nb, &runs);
    std::fs::create_dir_all(out.join("charts")).map_err(|source| crate::error::Error::Write {
        path: out.to_path_buf(),
        source,
    })?;
    let deviation = model
        .comparison
        .as_ref()
        .map_or(Vec::new(), |c| c.deviation_curves.clone());
    let charts = if runs.is_empty() {
        Vec::new()
    } else {
        super::charts::build(&runs, &deviation, &model.tones, out)?
    };
    let mut written = Vec::new();
    for (file, _, svg) in &charts {
        if svg.is_empty() {
            continue;
        }
        let path = out.join("charts").join(format!("{file}.svg"));
        crate::files::write_whole(&path, svg.as_bytes())?;
        written.push(path);
    }
    let path = out.join("report.html");
    crate::files::write_whole(&path, page(&model, &charts).into_string().as_bytes())?;
    Ok(ReportFiles {
        html: path,
        charts: written,
    })
}
