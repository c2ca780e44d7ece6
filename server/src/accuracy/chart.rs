//! Trend charts as SVG text, drawn by hand: a few lines and bars need no
//! plotting library, and hand-written markup lets every series carry a dash
//! pattern, a marker shape or a hatch and a text label besides its colour, so
//! the charts read in greyscale print. Pure string building; no I/O.

use std::fmt::Write as _;

const WIDTH: f64 = 720.0;
const HEIGHT: f64 = 260.0;
const LEFT: f64 = 56.0;
const RIGHT: f64 = 70.0;
const TOP: f64 = 30.0;
const BOTTOM: f64 = 52.0;
/// Most x labels written under an axis; others are thinned out.
const MAX_X_LABELS: usize = 14;
/// Most bars or points labelled with their value.
const MAX_VALUE_LABELS: usize = 16;

/// How a series is drawn: colour, dash, marker or hatch, chosen by index.
struct Style {
    colour: &'static str,
    dash: &'static str,
    marker: Marker,
}

#[derive(Clone, Copy)]
enum Marker {
    Circle,
    Square,
    Triangle,
}

const STYLES: [Style; 3] = [
    Style {
        colour: "#4d6b3c",
        dash: "",
        marker: Marker::Circle,
    },
    Style {
        colour: "#8a5a00",
        dash: "8 4",
        marker: Marker::Square,
    },
    Style {
        colour: "#2f4f8a",
        dash: "2 3",
        marker: Marker::Triangle,
    },
];

/// One line of a line chart: its label and one value (or gap) per x position.
pub struct Line {
    pub label: String,
    pub values: Vec<Option<f64>>,
}

/// One series of a bar chart.
pub struct Bars {
    pub label: String,
    pub values: Vec<f64>,
}

/// Escapes text for SVG.
pub fn escape(text: &str) -> String {
    text.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}

fn open(out: &mut String, id: &str, title: &str) {
    let t = escape(title);
    let _ = write!(
        out,
        r#"<svg xmlns="http://www.w3.org/2000/svg" class="chart" id="{id}" viewBox="0 0 {WIDTH} {HEIGHT}" role="img" aria-labelledby="{id}-t"><title id="{id}-t">{t}</title>"#
    );
    let _ = write!(
        out,
        r##"<defs><pattern id="{id}-h0" width="6" height="6" patternUnits="userSpaceOnUse"><rect width="6" height="6" fill="{c0}"/></pattern><pattern id="{id}-h1" width="6" height="6" patternUnits="userSpaceOnUse" patternTransform="rotate(45)"><rect width="6" height="6" fill="#fff"/><rect width="3" height="6" fill="{c1}"/></pattern><pattern id="{id}-h2" width="6" height="6" patternUnits="userSpaceOnUse"><rect width="6" height="6" fill="#fff"/><circle cx="3" cy="3" r="1.6" fill="{c2}"/></pattern></defs>"##,
        c0 = STYLES[0].colour,
        c1 = STYLES[1].colour,
        c2 = STYLES[2].colour,
    );
}

fn x_of(i: usize, n: usize) -> f64 {
    let span = WIDTH - LEFT - RIGHT;
    if n <= 1 {
        LEFT + span / 2.0
    } else {
        LEFT + span * i as f64 / (n - 1) as f64
    }
}

fn x_axis(out: &mut String, labels: &[String], x: impl Fn(usize) -> f64) {
    let y = HEIGHT - BOTTOM;
    let _ = write!(
        out,
        r##"<line x1="{LEFT}" y1="{y}" x2="{}" y2="{y}" stroke="#1f2a30"/>"##,
        WIDTH - RIGHT
    );
    let step = labels.len().div_ceil(MAX_X_LABELS).max(1);
    for (i, l) in labels.iter().enumerate().step_by(step) {
        let _ = write!(
            out,
            r##"<text x="{:.1}" y="{:.1}" font-size="11" text-anchor="middle" fill="#1f2a30">{}</text>"##,
            x(i),
            y + 16.0,
            escape(l)
        );
    }
}

fn y_grid(out: &mut String, lo: f64, hi: f64, ticks: &[f64], fmt: &dyn Fn(f64) -> String) {
    for &t in ticks {
        let y = y_of(t, lo, hi);
        let _ = write!(
            out,
            r##"<line x1="{LEFT}" y1="{y:.1}" x2="{}" y2="{y:.1}" stroke="#d5d2c8" stroke-width="1"/><text x="{}" y="{:.1}" font-size="11" text-anchor="end" fill="#50616b">{}</text>"##,
            WIDTH - RIGHT,
            LEFT - 6.0,
            y + 4.0,
            escape(&fmt(t))
        );
    }
}

fn y_of(v: f64, lo: f64, hi: f64) -> f64 {
    let span = HEIGHT - TOP - BOTTOM;
    let f = if hi > lo { (v - lo) / (hi - lo) } else { 0.5 };
    TOP + span * (1.0 - f)
}

fn marker(out: &mut String, m: Marker, x: f64, y: f64, colour: &str) {
    match m {
        Marker::Circle => {
            let _ = write!(
                out,
                r#"<circle cx="{x:.1}" cy="{y:.1}" r="4" fill="{colour}"/>"#
            );
        }
        Marker::Square => {
            let _ = write!(
                out,
                r#"<rect x="{:.1}" y="{:.1}" width="8" height="8" fill="{colour}"/>"#,
                x - 4.0,
                y - 4.0
            );
        }
        Marker::Triangle => {
            let _ = write!(
                out,
                r#"<path d="M{x:.1} {:.1} L{:.1} {:.1} L{:.1} {:.1} Z" fill="{colour}"/>"#,
                y - 5.0,
                x + 5.0,
                y + 4.0,
                x - 5.0,
                y + 4.0
            );
        }
    }
}

fn legend(out: &mut String, items: &[(String, usize)], id: &str, bars: bool) {
    let mut x = LEFT;
    let y = HEIGHT - 14.0;
    for (label, s) in items {
        let st = &STYLES[s % STYLES.len()];
        if bars {
            let _ = write!(
                out,
                r##"<rect x="{x:.1}" y="{:.1}" width="14" height="10" fill="url(#{id}-h{})" stroke="{}"/>"##,
                y - 9.0,
                s % STYLES.len(),
                st.colour
            );
        } else {
            let _ = write!(
                out,
                r#"<line x1="{x:.1}" y1="{:.1}" x2="{:.1}" y2="{:.1}" stroke="{}" stroke-width="2" stroke-dasharray="{}"/>"#,
                y - 4.0,
                x + 18.0,
                y - 4.0,
                st.colour,
                st.dash
            );
            marker(out, st.marker, x + 9.0, y - 4.0, st.colour);
        }
        let _ = write!(
            out,
            r##"<text x="{:.1}" y="{y:.1}" font-size="12" fill="#1f2a30">{}</text>"##,
            x + 22.0,
            escape(label)
        );
        x += 30.0 + 7.5 * label.chars().count() as f64;
    }
}

fn pct(v: f64) -> String {
    format!("{:.0} %", v * 100.0)
}

/// Draws shares (0 to 1) per x position as lines, with an optional target line.
pub fn share_lines(
    id: &str,
    title: &str,
    x: &[String],
    lines: &[Line],
    target: Option<f64>,
) -> String {
    let n = x.len();
    let mut lowest = target.unwrap_or(1.0);
    for l in lines {
        for v in l.values.iter().flatten() {
            lowest = lowest.min(*v);
        }
    }
    // Start the axis at the tenth below the lowest value, so small gaps show.
    let lo = ((lowest * 10.0).floor() / 10.0).clamp(0.0, 0.9);
    let hi = 1.0;
    let ticks: Vec<f64> = (0..=10)
        .map(|i| i as f64 / 10.0)
        .filter(|t| *t >= lo - 1e-9)
        .collect();
    let mut out = String::new();
    open(&mut out, id, title);
    y_grid(&mut out, lo, hi, &ticks, &pct);
    x_axis(&mut out, x, |i| x_of(i, n));
    if let Some(t) = target {
        let y = y_of(t, lo, hi);
        let _ = write!(
            out,
            r##"<line x1="{LEFT}" y1="{y:.1}" x2="{}" y2="{y:.1}" stroke="#9a3b2f" stroke-width="2" stroke-dasharray="10 3 2 3"/><text x="{}" y="{:.1}" font-size="11" fill="#9a3b2f">target {}</text>"##,
            WIDTH - RIGHT,
            WIDTH - RIGHT + 4.0,
            y + 4.0,
            pct(t)
        );
    }
    for (s, l) in lines.iter().enumerate() {
        let st = &STYLES[s % STYLES.len()];
        let mut d = String::new();
        let mut pen_up = true;
        for (i, v) in l.values.iter().enumerate() {
            match v {
                Some(v) => {
                    let _ = write!(
                        d,
                        "{}{:.1} {:.1} ",
                        if pen_up { "M" } else { "L" },
                        x_of(i, n),
                        y_of(*v, lo, hi)
                    );
                    pen_up = false;
                }
                None => pen_up = true,
            }
        }
        if !d.is_empty() {
            let _ = write!(
                out,
                r#"<path d="{}" fill="none" stroke="{}" stroke-width="2" stroke-dasharray="{}"/>"#,
                d.trim_end(),
                st.colour,
                st.dash
            );
        }
        for (i, v) in l.values.iter().enumerate() {
            if let Some(v) = v {
                marker(&mut out, st.marker, x_of(i, n), y_of(*v, lo, hi), st.colour);
            }
        }
        // Name the line at its last point, so it is known without the legend's colour.
        if let Some((i, v)) = l
            .values
            .iter()
            .enumerate()
            .rev()
            .find_map(|(i, v)| v.map(|v| (i, v)))
        {
            let _ = write!(
                out,
                r#"<text x="{:.1}" y="{:.1}" font-size="12" font-weight="600" fill="{}">{}</text>"#,
                x_of(i, n) + 7.0,
                y_of(v, lo, hi) - 6.0,
                st.colour,
                escape(&l.label)
            );
        }
    }
    let items: Vec<(String, usize)> = lines
        .iter()
        .enumerate()
        .map(|(s, l)| (l.label.clone(), s))
        .collect();
    legend(&mut out, &items, id, false);
    out.push_str("</svg>");
    out
}

/// Draws series of values per x position as grouped bars from a zero line.
pub fn bars(
    id: &str,
    title: &str,
    x: &[String],
    series: &[Bars],
    fmt: &dyn Fn(f64) -> String,
) -> String {
    let n = x.len().max(1);
    let mut lo: f64 = 0.0;
    let mut hi: f64 = 0.0;
    for s in series {
        for &v in &s.values {
            lo = lo.min(v);
            hi = hi.max(v);
        }
    }
    if hi - lo < 1e-9 {
        hi = lo + 1.0;
    }
    let pad = (hi - lo) * 0.12;
    let (lo, hi) = (if lo < 0.0 { lo - pad } else { lo }, hi + pad);
    let ticks: Vec<f64> = (0..=4).map(|i| lo + (hi - lo) * i as f64 / 4.0).collect();
    let mut out = String::new();
    open(&mut out, id, title);
    y_grid(&mut out, lo, hi, &ticks, fmt);
    let slot = (WIDTH - LEFT - RIGHT) / n as f64;
    let centre = |i: usize| LEFT + slot * (i as f64 + 0.5);
    x_axis(&mut out, x, centre);
    let zero = y_of(0.0, lo, hi);
    let _ = write!(
        out,
        r##"<line x1="{LEFT}" y1="{zero:.1}" x2="{}" y2="{zero:.1}" stroke="#1f2a30" stroke-width="1.5"/>"##,
        WIDTH - RIGHT
    );
    let k = series.len().max(1) as f64;
    let bar_w = (slot * 0.8 / k).min(28.0);
    let labelled = x.len() <= MAX_VALUE_LABELS;
    for (s, b) in series.iter().enumerate() {
        let st = &STYLES[s % STYLES.len()];
        for (i, &v) in b.values.iter().enumerate() {
            let x0 = centre(i) - bar_w * k / 2.0 + bar_w * s as f64;
            let y = y_of(v, lo, hi);
            let (top, h) = if v >= 0.0 {
                (y, zero - y)
            } else {
                (zero, y - zero)
            };
            let _ = write!(
                out,
                r##"<rect x="{x0:.1}" y="{top:.1}" width="{:.1}" height="{:.1}" fill="url(#{id}-h{})" stroke="{}"><title>{} {}: {}</title></rect>"##,
                bar_w - 2.0,
                h.max(0.5),
                s % STYLES.len(),
                st.colour,
                escape(&b.label),
                escape(&x[i.min(x.len().saturating_sub(1))]),
                escape(&fmt(v))
            );
            if labelled {
                let ty = if v >= 0.0 { top - 3.0 } else { top + h + 11.0 };
                let _ = write!(
                    out,
                    r##"<text x="{:.1}" y="{ty:.1}" font-size="9" text-anchor="middle" fill="#1f2a30">{}</text>"##,
                    x0 + bar_w / 2.0 - 1.0,
                    escape(&fmt(v))
                );
            }
        }
    }
    let items: Vec<(String, usize)> = series
        .iter()
        .enumerate()
        .map(|(s, b)| (b.label.clone(), s))
        .collect();
    legend(&mut out, &items, id, true);
    out.push_str("</svg>");
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_line_chart_names_its_lines_and_target_in_text() {
        let svg = share_lines(
            "ira",
            "IRA <by> class",
            &["2026-W10".into(), "2026-W11".into()],
            &[
                Line {
                    label: "A".into(),
                    values: vec![Some(0.5), None],
                },
                Line {
                    label: "B".into(),
                    values: vec![Some(0.9), Some(1.0)],
                },
            ],
            Some(0.95),
        );
        assert!(svg.starts_with("<svg") && svg.ends_with("</svg>"));
        assert!(svg.contains("IRA &lt;by&gt; class"));
        assert!(svg.contains("target 95 %"));
        assert!(svg.contains(">2026-W11</text>"));
        // Each line is labelled in text and drawn with its own dash pattern.
        assert!(svg.contains(">A</text>") && svg.contains(">B</text>"));
        assert!(svg.contains(r#"stroke-dasharray="8 4""#));
        // The axis starts at the tenth below the lowest value: 50 %.
        assert!(svg.contains(">50 %</text>") && !svg.contains(">40 %</text>"));
    }

    #[test]
    fn bars_go_below_zero_for_losses_and_carry_hatches() {
        let svg = bars(
            "adj",
            "Adjustments",
            &["W1".into(), "W2".into()],
            &[
                Bars {
                    label: "net".into(),
                    values: vec![-30.0, 10.0],
                },
                Bars {
                    label: "gross".into(),
                    values: vec![50.0, 10.0],
                },
            ],
            &|v| format!("{v:.0}"),
        );
        assert!(svg.contains("url(#adj-h1)"));
        assert!(svg.contains("net W1: -30"));
        assert!(svg.contains("gross W1: 50"));
    }
}
