use super::*;

fn weeks(n: usize) -> Vec<String> {
    (0..n).map(|i| format!("2026-W{:02}", 10 + i)).collect()
}

fn money(v: f64) -> String {
    format!("{:.0}", v)
}

const MONEY: BarAxis<'static> = BarAxis {
    fmt: &money,
    min_step: 1.0,
};

/// Reads every `<text>` of an SVG back: (content, its box as the layout estimated it).
fn texts(svg: &str) -> Vec<(String, labels::Rect)> {
    let attr = |tag: &str, name: &str| -> String {
        let key = format!(" {name}=\"");
        let from = tag.find(&key).unwrap_or_else(|| panic!("{name} in {tag}")) + key.len();
        tag[from..].split('"').next().unwrap().to_string()
    };
    svg.split("<text ")
        .skip(1)
        .map(|chunk| {
            let (tag, rest) = chunk.split_once('>').unwrap();
            let tag = format!(" {tag}");
            let content = rest.split("</text>").next().unwrap().to_string();
            let anchor = match attr(&tag, "text-anchor").as_str() {
                "start" => Anchor::Start,
                "middle" => Anchor::Middle,
                _ => Anchor::End,
            };
            let b = text_box(
                &content,
                attr(&tag, "font-size").parse().unwrap(),
                attr(&tag, "x").parse().unwrap(),
                attr(&tag, "y").parse().unwrap(),
                anchor,
            );
            (content, b)
        })
        .collect()
}

fn assert_apart(svg: &str) {
    let t = texts(svg);
    for (i, (a, ra)) in t.iter().enumerate() {
        for (b, rb) in &t[i + 1..] {
            let meets = ra.x0 < rb.x1 && rb.x0 < ra.x1 && ra.y0 < rb.y1 && rb.y0 < ra.y1;
            assert!(!meets, "{a:?} {ra:?} meets {b:?} {rb:?}");
        }
    }
}

fn class_lines(n: usize) -> Vec<Line> {
    // Three classes whose last points nearly coincide, near the target.
    let wave = |base: f64, k: usize| -> Vec<Option<f64>> {
        (0..n)
            .map(|i| Some(base + 0.01 * ((i * k) % 5) as f64))
            .collect()
    };
    vec![
        Line {
            label: "A".into(),
            values: wave(0.93, 1),
        },
        Line {
            label: "B".into(),
            values: wave(0.935, 2),
        },
        Line {
            label: "C".into(),
            values: wave(0.94, 3),
        },
    ]
}

#[test]
fn a_line_chart_names_its_lines_and_target_in_text() {
    let svg = share_lines(
        WIDE,
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
        "No counts in this period",
    );
    assert!(svg.starts_with("<svg") && svg.ends_with("</svg>"));
    assert!(svg.contains(r#"class="chart wide""#));
    assert!(svg.contains("IRA &lt;by&gt; class"));
    assert!(svg.contains(">target 95 %</text>"));
    assert!(svg.contains(">2026-W11</text>"));
    // Each line is labelled in text and drawn with its own dash pattern.
    assert!(svg.contains(">A</text>") && svg.contains(">B</text>"));
    assert!(svg.contains(r#"stroke-dasharray="8 4""#));
    // The axis starts at a round tick at or below the lowest value, 50 %.
    assert!(svg.contains(">50 %</text>") && !svg.contains(">40 %</text>"));
    assert_apart(&svg);
}

#[test]
fn bars_go_below_zero_for_losses_and_carry_hatches() {
    let svg = bars(
        WIDE,
        "adj",
        "Adjustments",
        &["W1".into(), "W2".into()],
        &[
            Bars {
                label: "net".into(),
                values: vec![Some(-30.0), Some(10.0)],
            },
            Bars {
                label: "gross".into(),
                values: vec![Some(50.0), Some(10.0)],
            },
        ],
        &MONEY,
        "No counts in this period",
    );
    assert!(svg.contains("url(#adj-h1)"));
    assert!(svg.contains("net W1: -30"));
    assert!(svg.contains("gross W1: 50"));
    // Round ticks covering −30 to 50: −40 … 60 in twenties.
    for tick in ["-40", "-20", "0", "20", "40", "60"] {
        assert!(svg.contains(&format!(">{tick}</text>")), "{tick}: {svg}");
    }
    assert_apart(&svg);
}

#[test]
fn a_chart_with_nothing_to_show_says_so_in_words() {
    for frame in FRAMES {
        let svg = share_lines(
            frame,
            "ira",
            "IRA",
            &weeks(13),
            &[Line {
                label: "A".into(),
                values: vec![None; 13],
            }],
            Some(0.95),
            "No counts in this period",
        );
        assert!(svg.contains(">No counts in this period</text>"), "{svg}");
        assert!(!svg.contains("<path"), "no empty lines drawn");
        let svg = bars(
            frame,
            "adj",
            "Adjustments",
            &[],
            &[],
            &MONEY,
            "No counts in this period",
        );
        assert!(svg.contains(">No counts in this period</text>"), "{svg}");
    }
}

#[test]
fn a_value_axis_of_small_whole_numbers_prints_each_label_once() {
    // 0 to 1 minor unit used to print "0, 0, 1, 1, 1".
    let svg = bars(
        WIDE,
        "adj",
        "Adjustments",
        &weeks(3),
        &[Bars {
            label: "gross".into(),
            values: vec![Some(1.0), Some(0.0), Some(1.0)],
        }],
        &MONEY,
        "none",
    );
    // The value axis's labels are the ticks.
    let ticks: Vec<String> = svg
        .split("<text ")
        .filter(|t| t.contains(r#"class="tick""#))
        .map(|t| {
            t.split('>')
                .nth(1)
                .unwrap()
                .split('<')
                .next()
                .unwrap()
                .to_string()
        })
        .collect();
    assert_eq!(ticks, ["0", "1"]);
}

#[test]
fn no_two_labels_meet_in_either_frame_with_many_weeks() {
    for frame in FRAMES {
        for n in [1, 5, 13, 14, 27, 53] {
            let x = weeks(n);
            let svg = share_lines(frame, "ira", "IRA", &x, &class_lines(n), Some(0.95), "none");
            assert_apart(&svg);
            let shown = texts(&svg)
                .iter()
                .filter(|(t, _)| t.starts_with("2026-W"))
                .count();
            assert!(shown >= 1 && shown <= n, "{n} weeks, {shown} labels");
            if n >= 5 {
                assert!(shown >= 2, "{}: {n} weeks, {shown} labels", frame.name);
            }
            let svg = bars(
                frame,
                "adj",
                "Net and gross",
                &x,
                &[
                    Bars {
                        label: "net".into(),
                        values: (0..n)
                            .map(|i| Some(-123_456.0 + 9_999.0 * i as f64))
                            .collect(),
                    },
                    Bars {
                        label: "gross".into(),
                        values: (0..n)
                            .map(|i| Some(250_000.0 - 7_777.0 * i as f64))
                            .collect(),
                    },
                ],
                &MONEY,
                "none",
            );
            assert_apart(&svg);
        }
    }
}

#[test]
fn per_frame_draws_a_narrow_and_a_wide_chart_with_their_own_ids() {
    let both = per_frame("chart-ira", |f, id| {
        share_lines(f, id, "IRA", &weeks(2), &class_lines(2), None, "none")
    });
    assert_eq!(both.matches("<svg").count(), 2);
    assert!(both.contains(r#"id="chart-ira-narrow""#) && both.contains(r#"id="chart-ira-wide""#));
    assert!(both.contains(r#"class="chart narrow""#) && both.contains(r#"class="chart wide""#));
}
