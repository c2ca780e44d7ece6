//! Where a chart's text may go: each label's box is estimated from its characters and
//! font size (generously, for a wide sans-serif face), and a label is written only
//! where its box meets no box already taken. No I/O.

/// Space kept clear around every label, in user units.
const GAP: f64 = 2.0;
/// A glyph's height above the baseline and below it, as a share of the font size
/// (a little over what common sans-serif faces reach).
const ASCENT: f64 = 0.95;
const DESCENT: f64 = 0.3;

/// How a label hangs on its x position.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Anchor {
    Start,
    Middle,
    End,
}

impl Anchor {
    /// The SVG `text-anchor` value.
    pub fn svg(self) -> &'static str {
        match self {
            Anchor::Start => "start",
            Anchor::Middle => "middle",
            Anchor::End => "end",
        }
    }
}

/// A box in the chart's user units.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Rect {
    pub x0: f64,
    pub y0: f64,
    pub x1: f64,
    pub y1: f64,
}

impl Rect {
    fn meets(&self, other: &Rect) -> bool {
        self.x0 < other.x1 + GAP
            && other.x0 < self.x1 + GAP
            && self.y0 < other.y1 + GAP
            && other.y0 < self.y1 + GAP
    }
}

/// Estimates how wide `text` is at `size`: per character, an upper bound of its
/// advance in a wide sans-serif face.
pub fn text_width(text: &str, size: f64) -> f64 {
    let ems: f64 = text
        .chars()
        .map(|c| match c {
            ' ' | '.' | ',' | ':' | ';' | '\'' | '|' | '!' | 'i' | 'j' | 'l' | 'I' => 0.34,
            '-' | '(' | ')' | 'f' | 't' | 'r' => 0.45,
            'm' | 'w' | 'M' | 'W' | '%' | '@' => 1.0,
            c if c.is_ascii_digit() => 0.65,
            c if c.is_ascii_lowercase() => 0.64,
            c if c.is_ascii_uppercase() => 0.78,
            _ => 0.8,
        })
        .sum();
    ems * size
}

/// The box of `text` written at (`x`, baseline `y`).
pub fn text_box(text: &str, size: f64, x: f64, y: f64, anchor: Anchor) -> Rect {
    let w = text_width(text, size);
    let x0 = match anchor {
        Anchor::Start => x,
        Anchor::Middle => x - w / 2.0,
        Anchor::End => x - w,
    };
    Rect {
        x0,
        y0: y - ASCENT * size,
        x1: x0 + w,
        y1: y + DESCENT * size,
    }
}

/// The boxes taken so far in one chart.
#[derive(Default)]
pub struct Taken {
    boxes: Vec<Rect>,
    /// The drawing's extent: a label must fit inside it.
    bounds: Option<Rect>,
}

impl Taken {
    /// Starts with nothing taken inside a drawing `width` × `height`.
    pub fn within(width: f64, height: f64) -> Self {
        Taken {
            boxes: Vec::new(),
            bounds: Some(Rect {
                x0: 0.0,
                y0: 0.0,
                x1: width,
                y1: height,
            }),
        }
    }

    /// Whether `r` lies inside the drawing and meets nothing taken.
    pub fn is_free(&self, r: &Rect) -> bool {
        let inside = self
            .bounds
            .is_none_or(|b| r.x0 >= b.x0 && r.x1 <= b.x1 && r.y0 >= b.y0 && r.y1 <= b.y1);
        inside && !self.boxes.iter().any(|b| b.meets(r))
    }

    /// Takes `r` if it is free; says whether it did.
    pub fn take(&mut self, r: Rect) -> bool {
        let free = self.is_free(&r);
        if free {
            self.boxes.push(r);
        }
        free
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_label_next_to_a_taken_one_is_refused_and_one_further_away_is_not() {
        let mut t = Taken::within(360.0, 200.0);
        assert!(t.take(text_box("2026-W36", 11.0, 100.0, 150.0, Anchor::Middle)));
        assert!(!t.take(text_box("2026-W37", 11.0, 130.0, 150.0, Anchor::Middle)));
        assert!(t.take(text_box("2026-W38", 11.0, 170.0, 150.0, Anchor::Middle)));
        // Out of the drawing: refused.
        assert!(!t.take(text_box("2026-W39", 11.0, 5.0, 150.0, Anchor::Middle)));
    }
}
