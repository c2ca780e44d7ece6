//! The small timeline of a difference's detail page, drawn on the server as
//! SVG: the count window as a band, each movement of the key as a mark with
//! its delta (and its source's uncertainty as a whisker), the count's scans
//! as dots with their quantities. Pure text building, no I/O.

use crate::time::Timestamp;
use crate::time::day::SiteZone;
use std::fmt::Write as _;

/// Width and height of the drawing, in SVG units.
const WIDTH: f64 = 720.0;
const HEIGHT: f64 = 176.0;
/// Left and right margins of the time axis.
const MARGIN: f64 = 48.0;
/// Where the axis runs.
const AXIS_Y: f64 = 96.0;
/// Most marks drawn; the page's table lists every movement anyway.
pub const MAX_MARKS: usize = 200;

/// A movement of the key around the window.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Move {
    pub at: Timestamp,
    pub delta: i64,
    pub uncertainty_ms: i64,
    /// Its widened event time overlaps the window.
    pub inside: bool,
    /// What it was (its kind and source), for the tooltip.
    pub what: String,
}

/// A scan (or keyed quantity) of the key in the count.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Scan {
    pub at: Timestamp,
    pub qty: i64,
}

/// Everything the timeline shows.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Timeline {
    pub window_start: Timestamp,
    pub window_end: Timestamp,
    pub moves: Vec<Move>,
    pub scans: Vec<Scan>,
    /// The site's zone: labels and tooltips read in its local time.
    pub zone: SiteZone,
}

fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c => out.push(c),
        }
    }
    out
}

fn signed(n: i64) -> String {
    if n > 0 {
        format!("+{n}")
    } else {
        n.to_string()
    }
}

impl Timeline {
    /// Returns the time range drawn: everything shown, with a margin.
    fn range(&self) -> (i64, i64) {
        let mut lo = self.window_start.0;
        let mut hi = self.window_end.0;
        for m in self.moves.iter().take(MAX_MARKS) {
            let u = m.uncertainty_ms.max(0);
            lo = lo.min(m.at.0.saturating_sub(u));
            hi = hi.max(m.at.0.saturating_add(u));
        }
        for s in &self.scans {
            lo = lo.min(s.at.0);
            hi = hi.max(s.at.0);
        }
        let pad = ((hi - lo) / 20).max(1_000);
        (lo.saturating_sub(pad), hi.saturating_add(pad))
    }

    /// Draws the timeline as an SVG element.
    pub fn svg(&self) -> String {
        let clock = |t: Timestamp| self.zone.clock(&t);
        let when = |t: Timestamp| self.zone.local_time(&t);
        let (lo, hi) = self.range();
        let span = (hi - lo).max(1) as f64;
        let x = |t: i64| MARGIN + (t.saturating_sub(lo)) as f64 / span * (WIDTH - 2.0 * MARGIN);
        let mut s = String::new();
        let _ = write!(
            s,
            r#"<svg class="timeline" xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {WIDTH} {HEIGHT}" role="img" aria-label="Count window from {} to {} {} with {} movement(s) and {} scan(s)">"#,
            clock(self.window_start),
            clock(self.window_end),
            self.zone.abbreviation(self.window_end),
            self.moves.len().min(MAX_MARKS),
            self.scans.len()
        );
        let (ws, we) = (x(self.window_start.0), x(self.window_end.0));
        let _ = write!(
            s,
            r#"<rect class="window" x="{ws:.1}" y="24" width="{:.1}" height="120"><title>count window {} – {}</title></rect>"#,
            (we - ws).max(1.0),
            when(self.window_start),
            when(self.window_end)
        );
        let _ = write!(
            s,
            r#"<line class="axis" x1="{MARGIN}" y1="{AXIS_Y}" x2="{}" y2="{AXIS_Y}"/>"#,
            WIDTH - MARGIN
        );
        for m in self.moves.iter().take(MAX_MARKS) {
            let mx = x(m.at.0);
            let u = m.uncertainty_ms.max(0);
            let class = if m.inside {
                "move inside"
            } else {
                "move outside"
            };
            let _ = write!(
                s,
                r#"<g class="{class}" data-delta="{}"><title>{} {} at {}{}</title>"#,
                m.delta,
                escape(&m.what),
                signed(m.delta),
                when(m.at),
                if u > 0 {
                    format!(" ± {u} ms")
                } else {
                    String::new()
                }
            );
            if u > 0 {
                let _ = write!(
                    s,
                    r#"<line class="whisker" x1="{:.1}" y1="{}" x2="{:.1}" y2="{}"/>"#,
                    x(m.at.0.saturating_sub(u)),
                    AXIS_Y - 4.0,
                    x(m.at.0.saturating_add(u)),
                    AXIS_Y - 4.0
                );
            }
            let _ = write!(
                s,
                r#"<line x1="{mx:.1}" y1="{AXIS_Y}" x2="{mx:.1}" y2="44"/><text x="{mx:.1}" y="38" text-anchor="middle">{}</text></g>"#,
                signed(m.delta)
            );
        }
        for sc in &self.scans {
            let sx = x(sc.at.0);
            let _ = write!(
                s,
                r#"<g class="scan" data-qty="{}"><title>scan of {} at {}</title><circle cx="{sx:.1}" cy="{}" r="5"/><text x="{sx:.1}" y="{}" text-anchor="middle">{}</text></g>"#,
                sc.qty,
                sc.qty,
                when(sc.at),
                AXIS_Y + 18.0,
                AXIS_Y + 38.0,
                sc.qty
            );
        }
        let _ = write!(
            s,
            r#"<text class="tick" x="{ws:.1}" y="{}" text-anchor="end">{}</text><text class="tick" x="{we:.1}" y="{}" text-anchor="start">{}</text></svg>"#,
            HEIGHT - 6.0,
            clock(self.window_start),
            HEIGHT - 6.0,
            clock(self.window_end)
        );
        s
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn timeline() -> Timeline {
        Timeline {
            window_start: Timestamp(60_000),
            window_end: Timestamp(120_000),
            moves: vec![
                Move {
                    at: Timestamp(30_000),
                    delta: 5,
                    uncertainty_ms: 0,
                    inside: false,
                    what: "receipt <dock>".into(),
                },
                Move {
                    at: Timestamp(90_000),
                    delta: -3,
                    uncertainty_ms: 10_000,
                    inside: true,
                    what: "pick".into(),
                },
            ],
            scans: vec![Scan {
                at: Timestamp(100_000),
                qty: 12,
            }],
            zone: SiteZone::UTC,
        }
    }

    /// Reads the numbers of every `name="…"` attribute in the drawing.
    fn numbers(svg: &str, name: &str) -> Vec<f64> {
        svg.split(&format!(" {name}=\""))
            .skip(1)
            .filter_map(|p| p.split('"').next()?.parse().ok())
            .collect()
    }

    #[test]
    fn every_move_and_scan_is_drawn_inside_the_picture() {
        let svg = timeline().svg();
        assert_eq!(svg.matches("class=\"move ").count(), 2);
        assert_eq!(svg.matches("class=\"move inside\"").count(), 1);
        assert_eq!(svg.matches("class=\"scan\"").count(), 1);
        assert!(
            svg.contains(">-3</text>") && svg.contains(">+5</text>"),
            "{svg}"
        );
        assert!(svg.contains(">12</text>"));
        for name in ["x", "x1", "x2", "cx"] {
            for v in numbers(&svg, name) {
                assert!((0.0..=WIDTH).contains(&v), "{name}={v} in {svg}");
            }
        }
        // The earlier receipt lies left of the window, the pick inside it.
        let xs = numbers(&svg, "x1");
        let window_x = numbers(&svg, "x")[0];
        assert!(xs.iter().any(|&v| v < window_x), "{svg}");
        assert!(svg.contains("receipt &lt;dock&gt;"), "text is escaped");
        assert!(
            svg.contains("00:01:00") && svg.contains("00:02:00"),
            "{svg}"
        );
    }

    #[test]
    fn a_window_without_moves_still_draws_its_band() {
        let t = Timeline {
            moves: vec![],
            scans: vec![],
            ..timeline()
        };
        let svg = t.svg();
        assert!(svg.starts_with("<svg") && svg.ends_with("</svg>"));
        assert!(svg.contains("class=\"window\""));
        assert_eq!(svg.matches("class=\"move").count(), 0);
    }

    #[test]
    fn labels_read_in_the_site_local_time() {
        // 1970-01-01 00:01 UTC was 18:01 the day before in Chicago (CST, UTC-6; tz database).
        let t = Timeline {
            zone: SiteZone::parse("America/Chicago").unwrap(),
            ..timeline()
        };
        let svg = t.svg();
        assert!(svg.contains(">18:01:00</text>"), "{svg}");
        assert!(svg.contains("18:02:00 CST with"), "{svg}");
        assert!(
            svg.contains("scan of 12 at 1969-12-31 18:01:40 CST"),
            "{svg}"
        );
        assert!(!svg.contains("UTC"), "{svg}");
    }
}
