//! The long tables' view (the buffer, record error per item): which rows, in
//! which order, which page, and the links around it. No I/O: a page hands it
//! the query's text and its rows; the CSV exports use the same filter and
//! order without the paging.

use super::store::ItemRow;
use crate::input::text::{self, Kind};
use crate::planning::abc::Class;
use std::cmp::Ordering;
use std::collections::BTreeSet;

/// Rows a page shows when the query does not say.
pub const DEFAULT_PER_PAGE: usize = 50;
/// Most rows one page may show.
pub const MAX_PER_PAGE: usize = 500;
/// Highest page number a query may name (far past any site's item count).
pub const MAX_PAGE: usize = 1_000_000;

/// A row of a long table: every such row is about one item.
pub trait Listed {
    /// Returns the item the row is about.
    fn item(&self) -> &ItemRow;
}

/// What a column sorts by; a missing value (a dash on the page) sorts last
/// in both directions.
#[derive(Debug, Clone, PartialEq)]
pub enum SortKey {
    Text(String),
    Num(f64),
    Missing,
}

impl SortKey {
    /// Makes a number key, missing when there is none.
    pub fn num(v: Option<f64>) -> Self {
        v.map_or(SortKey::Missing, SortKey::Num)
    }

    /// Makes a text key that sorts without regard to case, missing when empty.
    pub fn text(v: &str) -> Self {
        if v.is_empty() {
            SortKey::Missing
        } else {
            SortKey::Text(v.to_lowercase())
        }
    }

    fn cmp_in(&self, other: &Self, dir: Dir) -> Ordering {
        let asc = match (self, other) {
            (SortKey::Missing, SortKey::Missing) => return Ordering::Equal,
            (SortKey::Missing, _) => return Ordering::Greater,
            (_, SortKey::Missing) => return Ordering::Less,
            (SortKey::Num(a), SortKey::Num(b)) => a.total_cmp(b),
            (SortKey::Text(a), SortKey::Text(b)) => a.cmp(b),
            // One column gives one kind of key; numbers first if one ever did not.
            (SortKey::Num(_), SortKey::Text(_)) => Ordering::Less,
            (SortKey::Text(_), SortKey::Num(_)) => Ordering::Greater,
        };
        match dir {
            Dir::Asc => asc,
            Dir::Desc => asc.reverse(),
        }
    }
}

/// One sortable column of a table.
pub struct Column<R> {
    /// The value of `sort` in the URL.
    pub name: &'static str,
    /// The header people read.
    pub label: &'static str,
    /// Right-aligned figures.
    pub numeric: bool,
    pub key: fn(&R) -> SortKey,
}

/// The order of a sort.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Dir {
    Asc,
    Desc,
}

impl Dir {
    fn as_str(self) -> &'static str {
        match self {
            Dir::Asc => "asc",
            Dir::Desc => "desc",
        }
    }
}

/// The view's parameters as the URL gave them; empty is the same as none.
#[derive(Debug, Default, Clone, Copy)]
pub struct RawView<'a> {
    pub sort: Option<&'a str>,
    pub dir: Option<&'a str>,
    pub class: Option<&'a str>,
    pub group: Option<&'a str>,
    pub q: Option<&'a str>,
    pub page: Option<&'a str>,
    pub per: Option<&'a str>,
}

/// A checked view of a table: filter, order and page.
#[derive(Debug, Clone, PartialEq)]
pub struct View {
    /// Index of the sort column; the SKU breaks ties.
    pub sort: usize,
    pub dir: Dir,
    pub class: Option<Class>,
    /// An item group, matched whole without regard to case.
    pub group: Option<String>,
    /// Text found in the SKU or description, without regard to case.
    pub text: Option<String>,
    /// 1-based.
    pub page: usize,
    pub per: usize,
}

fn given(v: Option<&str>) -> Option<&str> {
    v.map(str::trim).filter(|s| !s.is_empty())
}

fn whole(name: &str, text: &str, max: usize) -> Result<usize, String> {
    match text.parse::<usize>() {
        Ok(n) if (1..=max).contains(&n) => Ok(n),
        _ => Err(format!(
            "{name}: '{text}' is not a whole number from 1 to {max}"
        )),
    }
}

impl View {
    /// Checks the URL's parameters against a table's columns; an error starts
    /// with the parameter's name.
    pub fn parse<R>(columns: &[Column<R>], raw: RawView<'_>) -> Result<Self, String> {
        let sort = match given(raw.sort) {
            None => 0,
            Some(s) => columns.iter().position(|c| c.name == s).ok_or_else(|| {
                let names: Vec<&str> = columns.iter().map(|c| c.name).collect();
                format!("sort: '{s}' is not one of {}", names.join(", "))
            })?,
        };
        let dir = match given(raw.dir) {
            None | Some("asc") => Dir::Asc,
            Some("desc") => Dir::Desc,
            Some(d) => return Err(format!("dir: '{d}' is not asc or desc")),
        };
        let class = given(raw.class)
            .map(|c| {
                Class::parse(&c.to_ascii_uppercase())
                    .ok_or_else(|| format!("class: '{c}' is not A, B or C"))
            })
            .transpose()?;
        let group = given(raw.group)
            .map(|g| text::field("group", Kind::Name, g))
            .transpose()?;
        let text = given(raw.q)
            .map(|q| text::field("q", Kind::Description, q))
            .transpose()?;
        let page = given(raw.page)
            .map(|p| whole("page", p, MAX_PAGE))
            .transpose()?
            .unwrap_or(1);
        let per = given(raw.per)
            .map(|p| whole("per", p, MAX_PER_PAGE))
            .transpose()?
            .unwrap_or(DEFAULT_PER_PAGE);
        Ok(View {
            sort,
            dir,
            class,
            group,
            text,
            page,
            per,
        })
    }

    fn keeps(&self, item: &ItemRow) -> bool {
        if self.class.is_some() && item.class != self.class {
            return false;
        }
        if let Some(g) = &self.group
            && !item.group.eq_ignore_ascii_case(g)
        {
            return false;
        }
        if let Some(t) = &self.text {
            let t = t.to_lowercase();
            return item.sku.to_lowercase().contains(&t)
                || item.description.to_lowercase().contains(&t);
        }
        true
    }

    /// Keeps the rows the filter matches, in the view's order: the sort
    /// column, then the SKU ascending, so the order is total and repeatable.
    pub fn select<R: Listed>(&self, columns: &[Column<R>], rows: Vec<R>) -> Vec<R> {
        let key = columns[self.sort].key;
        let mut kept: Vec<(SortKey, R)> = rows
            .into_iter()
            .filter(|r| self.keeps(r.item()))
            .map(|r| (key(&r), r))
            .collect();
        kept.sort_by(|(ka, a), (kb, b)| {
            ka.cmp_in(kb, self.dir)
                .then_with(|| a.item().sku.cmp(&b.item().sku))
        });
        kept.into_iter().map(|(_, r)| r).collect()
    }

    /// Selects the rows and cuts out the view's page; a page past the last
    /// one is refused, naming it.
    pub fn page<R: Listed>(&self, columns: &[Column<R>], rows: Vec<R>) -> Result<Page<R>, String> {
        let all = self.select(columns, rows);
        let total = all.len();
        let pages = total.div_ceil(self.per).max(1);
        if self.page > pages {
            return Err(format!(
                "page: {} is past the last page ({pages}) of {total} rows at {} a page",
                self.page, self.per
            ));
        }
        let skip = (self.page - 1) * self.per;
        let rows: Vec<R> = all.into_iter().skip(skip).take(self.per).collect();
        Ok(Page {
            first: if rows.is_empty() { 0 } else { skip + 1 },
            last: skip + rows.len(),
            total,
            pages,
            rows,
        })
    }

    /// Writes the view as query pairs after `fixed` (the report's own
    /// parameters), leaving out what is not set and page 1.
    pub fn pairs<R>(
        &self,
        columns: &[Column<R>],
        fixed: &[(&str, String)],
    ) -> Vec<(String, String)> {
        let mut out: Vec<(String, String)> = fixed
            .iter()
            .filter(|(_, v)| !v.is_empty())
            .map(|(k, v)| (k.to_string(), v.clone()))
            .collect();
        if let Some(c) = self.class {
            out.push(("class".into(), c.to_string()));
        }
        if let Some(g) = &self.group {
            out.push(("group".into(), g.clone()));
        }
        if let Some(t) = &self.text {
            out.push(("q".into(), t.clone()));
        }
        out.push(("sort".into(), columns[self.sort].name.into()));
        out.push(("dir".into(), self.dir.as_str().into()));
        out.push(("per".into(), self.per.to_string()));
        if self.page > 1 {
            out.push(("page".into(), self.page.to_string()));
        }
        out
    }

    /// Writes the view as a query string (without the `?`).
    pub fn query<R>(&self, columns: &[Column<R>], fixed: &[(&str, String)]) -> String {
        serde_urlencoded::to_string(self.pairs(columns, fixed)).expect("string pairs always encode")
    }
}

/// One page of a table's rows.
#[derive(Debug)]
pub struct Page<R> {
    pub rows: Vec<R>,
    /// 1-based position of the first row shown; 0 when none is.
    pub first: usize,
    pub last: usize,
    /// Rows the filter matched, on every page.
    pub total: usize,
    pub pages: usize,
}

/// A column header: a link that sorts by it, and what it is sorted by now.
pub struct Header {
    pub label: &'static str,
    pub href: String,
    /// `ascending`, `descending` or `none`, for `aria-sort`.
    pub aria_sort: &'static str,
    pub arrow: &'static str,
    pub numeric: bool,
}

/// Everything a long table's page shows around its rows.
pub struct Shown {
    /// The page's own path, the filter form's action.
    pub path: String,
    pub headers: Vec<Header>,
    /// "rows X–Y of N", or that none match.
    pub summary: String,
    pub previous: Option<String>,
    pub next: Option<String>,
    /// The filter's current values, for the form.
    pub class: String,
    pub group: String,
    pub q: String,
    pub per: usize,
    pub sort: &'static str,
    pub dir: &'static str,
    /// Groups to choose from.
    pub groups: Vec<String>,
    /// The report's parameters that were given, for the form to send again.
    pub fixed: Vec<(String, String)>,
    /// The filter and order as a query string (no page), for the CSV link.
    pub csv_query: String,
}

/// Lists the item groups among the rows, in order.
pub fn groups<R: Listed>(rows: &[R]) -> Vec<String> {
    let set: BTreeSet<&str> = rows
        .iter()
        .map(|r| r.item().group.as_str())
        .filter(|g| !g.is_empty())
        .collect();
    set.into_iter().map(str::to_string).collect()
}

/// Builds what a page shows around `page`: `path` is the page's own path,
/// `fixed` the report's parameters every link keeps.
pub fn shown<R>(
    view: &View,
    columns: &[Column<R>],
    page: &Page<R>,
    path: &str,
    fixed: &[(&str, String)],
    groups: Vec<String>,
) -> Shown {
    let href = |v: &View| format!("{path}?{}", v.query(columns, fixed));
    let headers = columns
        .iter()
        .enumerate()
        .map(|(i, c)| {
            let current = i == view.sort;
            let dir = if current && view.dir == Dir::Asc {
                Dir::Desc
            } else {
                Dir::Asc
            };
            let sorted = View {
                sort: i,
                dir,
                page: 1,
                ..view.clone()
            };
            let (aria_sort, arrow) = match (current, view.dir) {
                (false, _) => ("none", ""),
                (true, Dir::Asc) => ("ascending", " ▲"),
                (true, Dir::Desc) => ("descending", " ▼"),
            };
            Header {
                label: c.label,
                href: href(&sorted),
                aria_sort,
                arrow,
                numeric: c.numeric,
            }
        })
        .collect();
    let to = |n: usize| {
        href(&View {
            page: n,
            ..view.clone()
        })
    };
    let summary = if page.total == 0 {
        "no rows match".to_string()
    } else {
        format!(
            "rows {}–{} of {} (page {} of {})",
            page.first, page.last, page.total, view.page, page.pages
        )
    };
    let unpaged = View {
        page: 1,
        ..view.clone()
    };
    let csv_pairs: Vec<(String, String)> = unpaged
        .pairs(columns, fixed)
        .into_iter()
        .filter(|(k, _)| k != "per")
        .collect();
    Shown {
        path: path.to_string(),
        headers,
        summary,
        previous: (view.page > 1).then(|| to(view.page - 1)),
        next: (view.page < page.pages).then(|| to(view.page + 1)),
        class: view.class.map(|c| c.to_string()).unwrap_or_default(),
        group: view.group.clone().unwrap_or_default(),
        q: view.text.clone().unwrap_or_default(),
        per: view.per,
        sort: columns[view.sort].name,
        dir: view.dir.as_str(),
        groups,
        fixed: fixed
            .iter()
            .filter(|(_, v)| !v.is_empty())
            .map(|(k, v)| (k.to_string(), v.clone()))
            .collect(),
        csv_query: serde_urlencoded::to_string(csv_pairs).expect("string pairs always encode"),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[derive(Debug)]
    struct R(ItemRow, Option<f64>);

    impl Listed for R {
        fn item(&self) -> &ItemRow {
            &self.0
        }
    }

    fn row(sku: &str, group: &str, class: Option<Class>, v: Option<f64>) -> R {
        R(
            ItemRow {
                sku: sku.into(),
                description: format!("Thing {sku}"),
                group: group.into(),
                class,
                unit_cost_minor: 1,
                keys: 1,
            },
            v,
        )
    }

    const COLUMNS: [Column<R>; 2] = [
        Column {
            name: "sku",
            label: "Item",
            numeric: false,
            key: |r| SortKey::text(&r.0.sku),
        },
        Column {
            name: "v",
            label: "V",
            numeric: true,
            key: |r| SortKey::num(r.1),
        },
    ];

    fn rows() -> Vec<R> {
        vec![
            row("S3", "bolts", Some(Class::A), Some(2.0)),
            row("S1", "nuts", Some(Class::B), None),
            row("S2", "bolts", None, Some(2.0)),
            row("S4", "Nuts", Some(Class::A), Some(1.0)),
        ]
    }

    fn view(raw: RawView<'_>) -> View {
        View::parse(&COLUMNS, raw).expect("the test's view is valid")
    }

    fn skus(rows: &[R]) -> Vec<&str> {
        rows.iter().map(|r| r.0.sku.as_str()).collect()
    }

    #[test]
    fn ties_break_by_sku_and_missing_values_go_last_both_ways() {
        for (dir, want) in [
            ("asc", ["S4", "S2", "S3", "S1"]),
            ("desc", ["S2", "S3", "S4", "S1"]),
        ] {
            let v = view(RawView {
                sort: Some("v"),
                dir: Some(dir),
                ..RawView::default()
            });
            assert_eq!(skus(&v.select(&COLUMNS, rows())), want, "dir {dir}");
        }
    }

    #[test]
    fn filters_combine_and_groups_match_without_case() {
        let v = view(RawView {
            class: Some("a"),
            group: Some("NUTS"),
            ..RawView::default()
        });
        assert_eq!(skus(&v.select(&COLUMNS, rows())), ["S4"]);
        let v = view(RawView {
            q: Some("thing s2"),
            ..RawView::default()
        });
        assert_eq!(skus(&v.select(&COLUMNS, rows())), ["S2"]);
    }

    #[test]
    fn pages_cut_at_their_bounds_and_a_page_past_the_end_is_refused() {
        let at = |p: &str| {
            view(RawView {
                page: Some(p),
                per: Some("3"),
                ..RawView::default()
            })
            .page(&COLUMNS, rows())
        };
        let p2 = at("2").unwrap();
        assert_eq!((p2.first, p2.last, p2.total, p2.pages), (4, 4, 4, 2));
        assert_eq!(skus(&p2.rows), ["S4"]);
        assert_eq!(
            at("3").unwrap_err(),
            "page: 3 is past the last page (2) of 4 rows at 3 a page"
        );
        let none = view(RawView {
            q: Some("nothing like it"),
            ..RawView::default()
        })
        .page(&COLUMNS, rows())
        .unwrap();
        assert_eq!((none.first, none.last, none.total), (0, 0, 0));
    }

    #[test]
    fn each_bad_parameter_is_named() {
        for (raw, start) in [
            (
                RawView {
                    sort: Some("colour"),
                    ..RawView::default()
                },
                "sort: 'colour' is not one of sku, v",
            ),
            (
                RawView {
                    dir: Some("up"),
                    ..RawView::default()
                },
                "dir:",
            ),
            (
                RawView {
                    class: Some("D"),
                    ..RawView::default()
                },
                "class:",
            ),
            (
                RawView {
                    page: Some("0"),
                    ..RawView::default()
                },
                "page: '0' is not a whole number from 1",
            ),
            (
                RawView {
                    per: Some("501"),
                    ..RawView::default()
                },
                "per:",
            ),
            (
                RawView {
                    q: Some("a\u{202e}b"),
                    ..RawView::default()
                },
                "q",
            ),
        ] {
            let e = View::parse(&COLUMNS, raw).unwrap_err();
            assert!(e.starts_with(start), "{e}");
        }
    }

    #[test]
    fn links_keep_the_other_parameters_and_headers_toggle_the_order() {
        let v = view(RawView {
            sort: Some("v"),
            group: Some("nuts & bolts"),
            page: Some("2"),
            per: Some("1"),
            ..RawView::default()
        });
        let fixed = [("until", "2026-06-30".to_string())];
        let page = Page::<R> {
            rows: vec![],
            first: 2,
            last: 2,
            total: 3,
            pages: 3,
        };
        let s = shown(&v, &COLUMNS, &page, "/p", &fixed, vec![]);
        assert_eq!(
            s.previous.as_deref(),
            Some("/p?until=2026-06-30&group=nuts+%26+bolts&sort=v&dir=asc&per=1")
        );
        assert_eq!(
            s.next.as_deref(),
            Some("/p?until=2026-06-30&group=nuts+%26+bolts&sort=v&dir=asc&per=1&page=3")
        );
        assert_eq!(s.headers[1].aria_sort, "ascending");
        assert!(s.headers[1].href.contains("sort=v&dir=desc"));
        assert_eq!(s.headers[0].aria_sort, "none");
        assert!(
            !s.headers[0].href.contains("page="),
            "a new order starts at page 1"
        );
        assert_eq!(s.summary, "rows 2–2 of 3 (page 2 of 3)");
        assert_eq!(
            s.csv_query,
            "until=2026-06-30&group=nuts+%26+bolts&sort=v&dir=asc"
        );
    }
}
