//! Trend charts as SVG text, drawn by hand. Every series carries a dash pattern, a
//! marker shape or a hatch and a text label besides its colour, so the charts read
//! in greyscale print; every label is placed where it meets no other (`labels`), on
//! value-axis ticks at round numbers (`ticks`). Each chart is drawn for a narrow and
//! a wide frame and the stylesheet shows the one that fits the screen, so text keeps
//! a readable size from a phone to a desktop. Pure string building; no I/O.

mod labels;
mod ticks;

use labels::{Anchor, Taken, text_box, text_width};
use std::fmt::Write as _;
pub use ticks::nice_ticks;

/// The drawing a chart is laid out for, in user units (about CSS pixels at the screen
/// width that shows it).
#[derive(Clone, Copy, Debug)]
pub struct Frame {
    /// Names the frame in ids and the class the stylesheet picks by.
    pub name: &'static str,
    pub width: f64,
    pub height: f64,
}

/// For phones: shown up to 600 px wide (see `cairn.css`).
pub const NARROW: Frame = Frame {
    name: "narrow",
    width: 360.0,
    height: 250.0,
};
/// For tablets and desktops.
pub const WIDE: Frame = Frame {
    name: "wide",
    width: 720.0,
    height: 270.0,
};
/// Both frames, in the order the page writes them.
pub const FRAMES: [Frame; 2] = [NARROW, WIDE];

/// Font sizes, user units.
const AXIS_FONT: f64 = 11.0;
const VALUE_FONT: f64 = 10.0;
const NAME_FONT: f64 = 12.0;
const LEGEND_FONT: f64 = 12.0;
const EMPTY_FONT: f64 = 15.0;
/// Room above the plot for value labels over the tallest bar.
const TOP: f64 = 18.0;
/// The least vertical room a value-axis tick takes, so its label stands clear.
const TICK_SPACING: f64 = 30.0;
/// Most ticks on a value axis.
const MAX_TICKS: usize = 6;
/// From the plot's bottom to the x labels' baseline, and their band's height.
const X_LABEL_DROP: f64 = 17.0;
const X_LABEL_BAND: f64 = 24.0;
/// A legend row's height.
const LEGEND_ROW: f64 = 18.0;
/// Vertical nudges tried, in turn, for a line's name at its last point.
const NAME_NUDGES: [f64; 5] = [-7.0, 15.0, -19.0, 27.0, -31.0];

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

const INK: &str = "#1f2a30";
const MUTED: &str = "#50616b";
const GRID: &str = "#d5d2c8";
const TARGET: &str = "#9a3b2f";

/// One line of a line chart: its label and one value (or gap) per x position.
pub struct Line {
    pub label: String,
    pub values: Vec<Option<f64>>,
}

/// One series of a bar chart: a value (or no bar) per x position.
pub struct Bars {
    pub label: String,
    pub values: Vec<Option<f64>>,
}

/// Escapes text for SVG.
pub fn escape(text: &str) -> String {
    text.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}

/// Draws a chart once per frame (`draw(frame, id)`), each SVG carrying its frame's
/// class, for the stylesheet to show the one that fits.
pub fn per_frame(id: &str, draw: impl Fn(Frame, &str) -> String) -> String {
    FRAMES
        .iter()
        .map(|f| draw(*f, &format!("{id}-{}", f.name)))
        .collect()
}

/// The plot area and the text laid out so far.
struct Canvas {
    frame: Frame,
    left: f64,
    right: f64,
    top: f64,
    bottom: f64,
    taken: Taken,
    out: String,
}

impl Canvas {
    fn text(&mut self, s: &str, size: f64, x: f64, y: f64, anchor: Anchor, attrs: &str) {
        let _ = write!(
            self.out,
            r#"<text x="{x:.1}" y="{y:.1}" font-size="{size}" text-anchor="{}" {attrs}>{}</text>"#,
            anchor.svg(),
            escape(s)
        );
    }

    /// Writes a label if its place is free; says whether it did.
    fn label(&mut self, s: &str, size: f64, x: f64, y: f64, anchor: Anchor, attrs: &str) -> bool {
        if self.taken.take(text_box(s, size, x, y, anchor)) {
            self.text(s, size, x, y, anchor, attrs);
            true
        } else {
            false
        }
    }

    fn y_of(&self, v: f64, lo: f64, hi: f64) -> f64 {
        let f = if hi > lo { (v - lo) / (hi - lo) } else { 0.5 };
        self.top + (self.bottom - self.top) * (1.0 - f)
    }

    fn slot(&self, n: usize) -> f64 {
        (self.right - self.left) / n.max(1) as f64
    }

    fn x_of(&self, i: usize, n: usize) -> f64 {
        self.left + self.slot(n) * (i as f64 + 0.5)
    }
}

fn open(out: &mut String, frame: Frame, id: &str, title: &str) {
    let (w, h, name) = (frame.width, frame.height, frame.name);
    let t = escape(title);
    let _ = write!(
        out,
        r#"<svg xmlns="http://www.w3.org/2000/svg" class="chart {name}" id="{id}" viewBox="0 0 {w} {h}" role="img" aria-labelledby="{id}-t"><title id="{id}-t">{t}</title>"#
    );
    let _ = write!(
        out,
        r##"<defs><pattern id="{id}-h0" width="6" height="6" patternUnits="userSpaceOnUse"><rect width="6" height="6" fill="{c0}"/></pattern><pattern id="{id}-h1" width="6" height="6" patternUnits="userSpaceOnUse" patternTransform="rotate(45)"><rect width="6" height="6" fill="#fff"/><rect width="3" height="6" fill="{c1}"/></pattern><pattern id="{id}-h2" width="6" height="6" patternUnits="userSpaceOnUse"><rect width="6" height="6" fill="#fff"/><circle cx="3" cy="3" r="1.6" fill="{c2}"/></pattern></defs>"##,
        c0 = STYLES[0].colour,
        c1 = STYLES[1].colour,
        c2 = STYLES[2].colour,
    );
}

/// An SVG of the frame's size saying `message` where the chart would be.
fn empty(frame: Frame, id: &str, title: &str, message: &str) -> String {
    let mut out = String::new();
    open(&mut out, frame, id, title);
    let _ = write!(
        out,
        r#"<rect x="1" y="1" width="{:.1}" height="{:.1}" fill="none" stroke="{GRID}" stroke-dasharray="4 4"/><text class="empty" x="{:.1}" y="{:.1}" font-size="{EMPTY_FONT}" text-anchor="middle" fill="{MUTED}">{}</text></svg>"#,
        frame.width - 2.0,
        frame.height - 2.0,
        frame.width / 2.0,
        frame.height / 2.0,
        escape(message)
    );
    out
}

/// Lays out the legend's rows from the left, wrapping at the frame's width; returns
/// each item's (x, row) and the number of rows.
fn legend_layout(frame: Frame, names: &[String], left: f64) -> (Vec<(f64, usize)>, usize) {
    let mut at = Vec::new();
    let (mut x, mut row) = (left, 0);
    for n in names {
        let w = 24.0 + text_width(n, LEGEND_FONT) + 14.0;
        if x > left && x + w > frame.width - 4.0 {
            x = left;
            row += 1;
        }
        at.push((x, row));
        x += w;
    }
    (at, row + 1)
}

/// Starts a chart: the value axis (round ticks, distinct labels, a gutter as wide as
/// the widest), the x labels thinned so none meets the next, and the legend. Returns
/// the canvas and the axis's (lo, hi).
#[allow(clippy::too_many_arguments)]
fn axes(
    frame: Frame,
    id: &str,
    title: &str,
    x: &[String],
    range: (f64, f64),
    min_step: f64,
    fmt: &dyn Fn(f64) -> String,
    legend: &[String],
    right_room: f64,
    bars: bool,
) -> (Canvas, f64, f64) {
    let (_, rows) = legend_layout(frame, legend, 8.0);
    let bottom = frame.height - X_LABEL_BAND - rows as f64 * LEGEND_ROW - 4.0;
    let room = bottom - TOP;
    let most = ((room / TICK_SPACING).floor() as usize + 1).clamp(3, MAX_TICKS);
    let ticks = nice_ticks(range.0, range.1, most, min_step);
    let (lo, hi) = (
        ticks[0],
        *ticks.last().expect("nice_ticks gives two or more"),
    );
    // Labels that print alike (a formatter coarser than the step) are written once.
    let mut labels: Vec<(f64, String)> = Vec::new();
    for t in ticks {
        let l = fmt(t);
        if labels.iter().all(|(_, seen)| *seen != l) {
            labels.push((t, l));
        }
    }
    let gutter = labels
        .iter()
        .map(|(_, l)| text_width(l, AXIS_FONT))
        .fold(0.0, f64::max);
    let mut c = Canvas {
        frame,
        left: (gutter + 12.0).max(28.0),
        right: frame.width - right_room.max(10.0),
        top: TOP,
        bottom,
        taken: Taken::within(frame.width, frame.height),
        out: String::new(),
    };
    open(&mut c.out, frame, id, title);
    let muted = format!(r#"class="tick" fill="{MUTED}""#);
    for (t, l) in &labels {
        let y = c.y_of(*t, lo, hi);
        let _ = write!(
            c.out,
            r#"<line x1="{:.1}" y1="{y:.1}" x2="{:.1}" y2="{y:.1}" stroke="{GRID}" stroke-width="1"/>"#,
            c.left, c.right
        );
        c.label(l, AXIS_FONT, c.left - 6.0, y + 4.0, Anchor::End, &muted);
    }
    let _ = write!(
        c.out,
        r#"<line x1="{:.1}" y1="{b:.1}" x2="{:.1}" y2="{b:.1}" stroke="{INK}"/>"#,
        c.left,
        c.right,
        b = c.bottom
    );
    x_labels(&mut c, x);
    legend_items(&mut c, id, legend, bars);
    (c, lo, hi)
}

/// Writes every `step`-th x label counting back from the latest, the step the least
/// that keeps the widest label clear of the next; a label that would still meet
/// another (the earliest, beside the value axis) is left out.
fn x_labels(c: &mut Canvas, x: &[String]) {
    let n = x.len();
    if n == 0 {
        return;
    }
    let widest = x
        .iter()
        .map(|l| text_width(l, AXIS_FONT))
        .fold(0.0, f64::max);
    let step = ((widest + 8.0) / c.slot(n)).ceil().max(1.0) as usize;
    let y = c.bottom + X_LABEL_DROP;
    let ink = format!(r#"class="x" fill="{INK}""#);
    for (i, l) in x.iter().enumerate().rev().step_by(step) {
        // Keep a label at either edge inside the drawing.
        let half = text_width(l, AXIS_FONT) / 2.0;
        let at = c.x_of(i, n).clamp(half + 1.0, c.frame.width - half - 1.0);
        c.label(l, AXIS_FONT, at, y, Anchor::Middle, &ink);
    }
}

fn legend_items(c: &mut Canvas, id: &str, names: &[String], bars: bool) {
    let (at, _) = legend_layout(c.frame, names, 8.0);
    let first_row = c.bottom + X_LABEL_BAND + LEGEND_ROW - 4.0;
    let ink = format!(r#"fill="{INK}""#);
    for (s, (name, (x, row))) in names.iter().zip(at).enumerate() {
        let st = &STYLES[s % STYLES.len()];
        let y = first_row + row as f64 * LEGEND_ROW;
        if bars {
            let _ = write!(
                c.out,
                r#"<rect x="{x:.1}" y="{:.1}" width="16" height="10" fill="url(#{id}-h{})" stroke="{}"/>"#,
                y - 9.0,
                s % STYLES.len(),
                st.colour
            );
        } else {
            let _ = write!(
                c.out,
                r#"<line x1="{x:.1}" y1="{:.1}" x2="{:.1}" y2="{:.1}" stroke="{}" stroke-width="2" stroke-dasharray="{}"/>"#,
                y - 4.0,
                x + 18.0,
                y - 4.0,
                st.colour,
                st.dash
            );
            marker(&mut c.out, st.marker, x + 9.0, y - 4.0, st.colour);
        }
        c.label(name, LEGEND_FONT, x + 24.0, y, Anchor::Start, &ink);
    }
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

fn pct(v: f64) -> String {
    format!("{:.0} %", v * 100.0)
}

/// Draws shares (0 to 1) per x position as lines, with an optional target line, for
/// one frame; says `empty_text` instead when no line has a value.
pub fn share_lines(
    frame: Frame,
    id: &str,
    title: &str,
    x: &[String],
    lines: &[Line],
    target: Option<f64>,
    empty_text: &str,
) -> String {
    let values: Vec<f64> = lines
        .iter()
        .flat_map(|l| l.values.iter().flatten())
        .copied()
        .collect();
    if values.is_empty() {
        return empty(frame, id, title, empty_text);
    }
    let lowest = values
        .iter()
        .chain(target.iter())
        .fold(1.0, |m, v| v.min(m));
    let names: Vec<String> = lines.iter().map(|l| l.label.clone()).collect();
    let name_room = names
        .iter()
        .map(|n| text_width(n, NAME_FONT))
        .fold(0.0, f64::max)
        + 12.0;
    let (mut c, lo, hi) = axes(
        frame,
        id,
        title,
        x,
        (lowest.max(0.0), 1.0),
        0.01,
        &pct,
        &names,
        name_room,
        false,
    );
    let n = x.len();
    if let Some(t) = target {
        let y = c.y_of(t, lo, hi);
        let _ = write!(
            c.out,
            r#"<line x1="{:.1}" y1="{y:.1}" x2="{:.1}" y2="{y:.1}" stroke="{TARGET}" stroke-width="2" stroke-dasharray="10 3 2 3"/>"#,
            c.left, c.right
        );
        let attrs = format!(r#"fill="{TARGET}""#);
        let text = format!("target {}", pct(t));
        // Above the line at the right, else below it.
        if !c.label(
            &text,
            AXIS_FONT,
            c.right - 2.0,
            y - 4.0,
            Anchor::End,
            &attrs,
        ) {
            c.label(
                &text,
                AXIS_FONT,
                c.right - 2.0,
                y + 13.0,
                Anchor::End,
                &attrs,
            );
        }
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
                        c.x_of(i, n),
                        c.y_of(*v, lo, hi)
                    );
                    pen_up = false;
                }
                None => pen_up = true,
            }
        }
        if !d.is_empty() {
            let _ = write!(
                c.out,
                r#"<path d="{}" fill="none" stroke="{}" stroke-width="2" stroke-dasharray="{}"/>"#,
                d.trim_end(),
                st.colour,
                st.dash
            );
        }
        for (i, v) in l.values.iter().enumerate() {
            if let Some(v) = v {
                let (px, py) = (c.x_of(i, n), c.y_of(*v, lo, hi));
                marker(&mut c.out, st.marker, px, py, st.colour);
            }
        }
    }
    // Name each line at its last point, so it is known without the legend's colour;
    // where another name or the target's label is in the way, a little higher or lower,
    // else not at all (the legend names it).
    for (s, l) in lines.iter().enumerate() {
        let st = &STYLES[s % STYLES.len()];
        if let Some((i, v)) = l
            .values
            .iter()
            .enumerate()
            .rev()
            .find_map(|(i, v)| v.map(|v| (i, v)))
        {
            let (px, py) = (c.x_of(i, n) + 7.0, c.y_of(v, lo, hi));
            let attrs = format!(r#"font-weight="600" fill="{}""#, st.colour);
            for dy in NAME_NUDGES {
                if c.label(&l.label, NAME_FONT, px, py + dy, Anchor::Start, &attrs) {
                    break;
                }
            }
        }
    }
    c.out.push_str("</svg>");
    c.out
}

/// How a bar chart's values are written.
pub struct BarAxis<'a> {
    /// Writes a value (tick and bar labels).
    pub fmt: &'a dyn Fn(f64) -> String,
    /// The finest step the labels tell apart (1 for whole minor units, 0.01 for
    /// whole percent), so no two ticks print alike.
    pub min_step: f64,
}

/// Draws series of values per x position as grouped bars from a zero line, for one
/// frame; says `empty_text` instead when no series has a value.
pub fn bars(
    frame: Frame,
    id: &str,
    title: &str,
    x: &[String],
    series: &[Bars],
    axis: &BarAxis<'_>,
    empty_text: &str,
) -> String {
    let values: Vec<f64> = series
        .iter()
        .flat_map(|s| s.values.iter().flatten())
        .copied()
        .collect();
    if values.is_empty() {
        return empty(frame, id, title, empty_text);
    }
    let lo = values.iter().fold(0.0, |m: f64, v| m.min(*v));
    let hi = values.iter().fold(0.0, |m: f64, v| m.max(*v));
    let names: Vec<String> = series.iter().map(|s| s.label.clone()).collect();
    let (mut c, lo, hi) = axes(
        frame,
        id,
        title,
        x,
        (lo, hi),
        axis.min_step,
        axis.fmt,
        &names,
        10.0,
        true,
    );
    let n = x.len().max(1);
    let zero = c.y_of(0.0, lo, hi);
    let _ = write!(
        c.out,
        r#"<line x1="{:.1}" y1="{zero:.1}" x2="{:.1}" y2="{zero:.1}" stroke="{INK}" stroke-width="1.5"/>"#,
        c.left, c.right
    );
    let k = series.len().max(1) as f64;
    let bar_w = (c.slot(n) * 0.8 / k).min(28.0);
    let mut value_labels = Vec::new();
    for (s, b) in series.iter().enumerate() {
        let st = &STYLES[s % STYLES.len()];
        for (i, v) in b.values.iter().enumerate() {
            let Some(v) = *v else { continue };
            let x0 = c.x_of(i, n) - bar_w * k / 2.0 + bar_w * s as f64;
            let y = c.y_of(v, lo, hi);
            let (top, h) = if v >= 0.0 {
                (y, zero - y)
            } else {
                (zero, y - zero)
            };
            let _ = write!(
                c.out,
                r#"<rect x="{x0:.1}" y="{top:.1}" width="{:.1}" height="{:.1}" fill="url(#{id}-h{})" stroke="{}"><title>{} {}: {}</title></rect>"#,
                (bar_w - 2.0).max(1.0),
                h.max(0.5),
                s % STYLES.len(),
                st.colour,
                escape(&b.label),
                escape(&x[i.min(x.len().saturating_sub(1))]),
                escape(&(axis.fmt)(v))
            );
            let ty = if v >= 0.0 { top - 3.0 } else { top + h + 11.0 };
            value_labels.push(((axis.fmt)(v), x0 + bar_w / 2.0 - 1.0, ty));
        }
    }
    // A bar's value is written where it fits; the table under the charts has them all.
    let ink = format!(r#"fill="{INK}""#);
    for (text, x, y) in value_labels {
        c.label(&text, VALUE_FONT, x, y, Anchor::Middle, &ink);
    }
    c.out.push_str("</svg>");
    c.out
}

#[cfg(test)]
mod tests;
