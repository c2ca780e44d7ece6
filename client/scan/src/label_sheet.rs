//! Printable A4 sheets of bin labels as SVG: Code 128 bars, the label text, the location
//! spelled out, and a reminder line on high levels.

use std::fmt::Write as _;

use crate::bin_label::BinLabel;
use crate::code128::{self, QUIET_ZONE_MODULES};

/// A4 page, in millimetres.
pub const PAGE_W_MM: f64 = 210.0;
pub const PAGE_H_MM: f64 = 297.0;
/// Label grid on a page.
pub const COLUMNS: usize = 2;
pub const ROWS: usize = 7;
/// Labels on one page.
pub const LABELS_PER_PAGE: usize = COLUMNS * ROWS;
/// Most pages one sheet renders (5,600 labels); callers split larger sites by zone.
pub const MAX_PAGES: usize = 400;

const MARGIN_MM: f64 = 10.0;
const TITLE_H_MM: f64 = 12.0;
const LABEL_W_MM: f64 = (PAGE_W_MM - 2.0 * MARGIN_MM) / COLUMNS as f64;
const LABEL_H_MM: f64 = (PAGE_H_MM - 2.0 * MARGIN_MM - TITLE_H_MM) / ROWS as f64;
/// Preferred narrow-bar width; shrunk when a long label would not fit.
const MODULE_MM: f64 = 0.33;
const BAR_H_MM: f64 = 15.0;
/// Levels from this one up get the reminder line.
const HIGH_LEVEL: u32 = 3;

/// Renders `labels` on A4 pages (stacked in one SVG, one page per 297 mm), each headed by
/// `title`. Labels beyond [`MAX_PAGES`] pages are left out and say so on the last page.
pub fn label_sheet_svg(labels: &[BinLabel], title: &str) -> String {
    let total_pages = labels.len().div_ceil(LABELS_PER_PAGE).max(1);
    let pages = total_pages.min(MAX_PAGES);
    let height = PAGE_H_MM * pages as f64;
    let mut svg = String::new();
    let _ = write!(
        svg,
        r#"<svg xmlns="http://www.w3.org/2000/svg" width="{PAGE_W_MM}mm" height="{height}mm" viewBox="0 0 {PAGE_W_MM} {height}" font-family="DejaVu Sans, Arial, sans-serif">"#
    );
    svg.push('\n');
    for page in 0..pages {
        let top = PAGE_H_MM * page as f64;
        let _ = writeln!(svg, r#"<g transform="translate(0 {top})">"#);
        let _ = writeln!(
            svg,
            r#"<text x="{MARGIN_MM}" y="{}" font-size="5" font-weight="bold">{}</text><text x="{}" y="{}" font-size="3" text-anchor="end">page {} of {}</text>"#,
            MARGIN_MM + 6.0,
            escape(title),
            PAGE_W_MM - MARGIN_MM,
            MARGIN_MM + 6.0,
            page + 1,
            pages
        );
        let on_page = labels
            .iter()
            .skip(page * LABELS_PER_PAGE)
            .take(LABELS_PER_PAGE);
        for (i, label) in on_page.enumerate() {
            let x = MARGIN_MM + LABEL_W_MM * (i % COLUMNS) as f64;
            let y = MARGIN_MM + TITLE_H_MM + LABEL_H_MM * (i / COLUMNS) as f64;
            render_label(&mut svg, label, x, y);
        }
        if labels.is_empty() {
            let _ = writeln!(
                svg,
                r#"<text x="{MARGIN_MM}" y="{}" font-size="4">No bins to label.</text>"#,
                MARGIN_MM + TITLE_H_MM + 6.0
            );
        }
        if page + 1 == pages && total_pages > pages {
            let _ = writeln!(
                svg,
                r#"<text x="{MARGIN_MM}" y="{}" font-size="3">{} more labels not shown: print one zone at a time.</text>"#,
                PAGE_H_MM - 4.0,
                labels.len() - pages * LABELS_PER_PAGE
            );
        }
        svg.push_str("</g>\n");
    }
    svg.push_str("</svg>\n");
    svg
}

fn render_label(svg: &mut String, label: &BinLabel, x: f64, y: f64) {
    let _ = writeln!(
        svg,
        r##"<g transform="translate({x:.2} {y:.2})"><rect x="1" y="1" width="{:.2}" height="{:.2}" rx="2" fill="none" stroke="#bbb" stroke-width="0.2"/>"##,
        LABEL_W_MM - 2.0,
        LABEL_H_MM - 2.0
    );
    if let Ok(modules) = code128::encode(label.text()) {
        let span = (modules.len() + 2 * QUIET_ZONE_MODULES) as f64;
        let m = MODULE_MM.min((LABEL_W_MM - 4.0) / span);
        let left = (LABEL_W_MM - modules.len() as f64 * m) / 2.0;
        svg.push_str(r##"<path fill="#000" d=""##);
        let mut i = 0;
        while i < modules.len() {
            if modules[i] {
                let run = modules[i..].iter().take_while(|&&b| b).count();
                let _ = write!(
                    svg,
                    "M{:.3} 4h{:.3}v{BAR_H_MM}h-{:.3}z",
                    left + i as f64 * m,
                    run as f64 * m,
                    run as f64 * m
                );
                i += run;
            } else {
                i += 1;
            }
        }
        svg.push_str("\"/>\n");
    }
    let mid = LABEL_W_MM / 2.0;
    let _ = writeln!(
        svg,
        r#"<text x="{mid:.2}" y="{:.2}" font-size="4.2" font-family="DejaVu Sans Mono, monospace" font-weight="bold" text-anchor="middle">{}</text>"#,
        4.0 + BAR_H_MM + 5.0,
        escape(label.text())
    );
    let _ = writeln!(
        svg,
        r#"<text x="{mid:.2}" y="{:.2}" font-size="3.2" text-anchor="middle">Zone {} · Aisle {} · Bay {} · Level {}</text>"#,
        4.0 + BAR_H_MM + 10.0,
        escape(label.zone()),
        escape(label.aisle()),
        escape(label.bay()),
        escape(label.level())
    );
    if is_high_level(label.level()) {
        let _ = writeln!(
            svg,
            r##"<text x="{mid:.2}" y="{:.2}" font-size="2.4" font-style="italic" text-anchor="middle" fill="#444">High level: use a step or platform and follow site rules.</text>"##,
            4.0 + BAR_H_MM + 14.5
        );
    }
    svg.push_str("</g>\n");
}

/// Says whether a level code is numeric and at or above [`HIGH_LEVEL`].
fn is_high_level(level: &str) -> bool {
    level.parse::<u32>().is_ok_and(|n| n >= HIGH_LEVEL)
}

fn escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            c if c.is_control() => {}
            c => out.push(c),
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn label(bay: &str, level: &str) -> BinLabel {
        BinLabel::encode("WH1", "A", "03", bay, level).expect("valid parts")
    }

    #[test]
    fn each_label_shows_its_text_and_location() {
        let svg = label_sheet_svg(&[label("12", "1")], "Zone A <test>");
        assert!(svg.contains(label("12", "1").text()));
        assert!(svg.contains("Zone A · Aisle 03 · Bay 12 · Level 1"));
        assert!(svg.contains("Zone A &lt;test&gt;"));
        assert!(!svg.contains("High level"));
    }

    #[test]
    fn only_high_levels_carry_the_reminder() {
        let svg = label_sheet_svg(&[label("12", "3")], "t");
        assert_eq!(svg.matches("High level").count(), 1);
    }

    #[test]
    fn fifteen_labels_take_two_pages() {
        let labels: Vec<_> = (0..15).map(|b| label(&b.to_string(), "1")).collect();
        let svg = label_sheet_svg(&labels, "t");
        assert!(svg.contains("page 2 of 2"));
        assert!(svg.contains(r#"height="594mm""#));
    }
}
