//! A one-site copy's new ids: which column names which table's id, the maps from the
//! file's ids to the target's, and the few texts that name ids (a result's evidence, a
//! recount task's detail, a list's warnings, the audit trail's subjects and details),
//! rewritten so they name the same rows on the target. A phone's sync event is kept word
//! for word (it is what the phone sent, and a resend is compared with it).

use super::{Cell, Transform};
use crate::netting::rule::MoveId;
use crate::netting::service::Evidence;
use anyhow::{Context, bail};
use std::collections::HashMap;
use std::sync::Arc;

/// The file's ids of one table and the target's, pairs sorted by the file's id. The
/// target's ids rise with the file's (they are handed out in that order), except for
/// people already in the target, who keep the ids they have.
#[derive(Debug, Default)]
pub(super) struct IdMap {
    pairs: Vec<(i64, i64)>,
}

impl IdMap {
    /// Pairs each of `old` with the same place in `new` (both ascending).
    pub(super) fn rising(old: &[i64], new: &[i64]) -> Self {
        debug_assert_eq!(old.len(), new.len());
        Self {
            pairs: old.iter().copied().zip(new.iter().copied()).collect(),
        }
    }

    /// Builds a map from any pairs.
    pub(super) fn of(mut pairs: Vec<(i64, i64)>) -> Self {
        pairs.sort_unstable();
        Self { pairs }
    }

    pub(super) fn get(&self, old: i64) -> Option<i64> {
        self.pairs
            .binary_search_by_key(&old, |p| p.0)
            .ok()
            .map(|i| self.pairs[i].1)
    }

    /// The target's id of the newest of the file's rows at or before `old` (0 for none):
    /// a high-water mark of the ledger keeps meaning "these of the site's movements were
    /// in" on the target.
    pub(super) fn floor(&self, old: i64) -> i64 {
        match self.pairs.partition_point(|p| p.0 <= old) {
            0 => 0,
            n => self.pairs[n - 1].1,
        }
    }
}

/// Every table's map, by table name.
pub(super) type Maps = HashMap<&'static str, IdMap>;

/// What happens to one column of a copied row.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Rule {
    Keep,
    /// An id of this table (the row's own, or one it refers to).
    Id(&'static str),
    /// The ledger's high-water mark when the row was made.
    Watermark,
    /// `count_result.evidence`: the movements it names.
    Evidence,
    /// A recount task's detail, a list's warnings: "(result N)", "(task N)".
    Refs,
    /// The audit trail: "difference N", "device N", "token N".
    AuditSubject,
    /// The audit trail: ids in the detail's JSON.
    AuditDetail,
}

/// Which table the id in `table.col` names, or what else the column needs.
fn rule(table: &str, col: &str) -> anyhow::Result<Rule> {
    Ok(match (table, col) {
        (t, "id") => Rule::Id(table_name(t)?),
        (_, "site_id") => Rule::Id("site"),
        (_, "zone_id") => Rule::Id("zone"),
        (_, "bin_id") => Rule::Id("bin"),
        (_, "item_id") => Rule::Id("item"),
        (_, "user_id" | "actor_id" | "decided_by") => Rule::Id("user_account"),
        (_, "device_id") => Rule::Id("device"),
        (_, "list_id") => Rule::Id("count_list"),
        (_, "pass_id") => Rule::Id("count_pass"),
        (_, "result_id" | "superseded_by" | "recount_of") => Rule::Id("count_result"),
        (_, "task_id") => Rule::Id("count_task"),
        (_, "run_id") => Rule::Id("abc_run"),
        (_, "movement_id" | "reverses") => Rule::Id("movement"),
        (_, "watermark") => Rule::Watermark,
        ("count_result", "evidence") => Rule::Evidence,
        ("count_task", "detail") | ("count_list", "warnings") => Rule::Refs,
        ("audit_event", "subject") => Rule::AuditSubject,
        ("audit_event", "detail") => Rule::AuditDetail,
        (t, c) if c.ends_with("_id") => {
            bail!("the copy does not know which table {t}.{c} refers to")
        }
        _ => Rule::Keep,
    })
}

/// The `'static` name of a copied table.
fn table_name(t: &str) -> anyhow::Result<&'static str> {
    super::TABLES
        .iter()
        .copied()
        .find(|n| *n == t)
        .with_context(|| format!("{t} is not a table the copy knows"))
}

/// Builds the change of every row of `table` (its columns `cols`) from the maps.
pub(super) fn transform(
    table: &'static str,
    cols: &[String],
    maps: Arc<Maps>,
) -> anyhow::Result<Transform> {
    let rules: Vec<(usize, String, Rule)> = cols
        .iter()
        .enumerate()
        .map(|(i, c)| Ok((i, c.clone(), rule(table, c)?)))
        .filter(|r| !matches!(r, Ok((_, _, Rule::Keep))))
        .collect::<anyhow::Result<_>>()?;
    let unmapped = rules.iter().find_map(|(_, _, r)| match r {
        Rule::Id(t) if !maps.contains_key(t) => Some(*t),
        _ => None,
    });
    if let Some(t) = unmapped {
        bail!("no ids of {t} were handed out before {table}");
    }
    Ok(Arc::new(move |row: &mut [Cell]| {
        for (i, col, rule) in &rules {
            apply(*rule, &mut row[*i], &maps).with_context(|| format!("{table}.{col}"))?;
        }
        Ok(())
    }))
}

fn map<'a>(maps: &'a Maps, table: &str) -> &'a IdMap {
    maps.get(table)
        .expect("checked when the transform was built")
}

fn apply(rule: Rule, cell: &mut Cell, maps: &Maps) -> anyhow::Result<()> {
    match (rule, cell) {
        (Rule::Keep, _) | (_, Cell::Null(_)) => {}
        (Rule::Id(t), Cell::Int(v)) => {
            *v = map(maps, t)
                .get(*v)
                .with_context(|| format!("{v} names a row of {t} that is not the site's"))?;
        }
        (Rule::Watermark, Cell::Int(v)) => *v = map(maps, "movement").floor(*v),
        (Rule::Evidence, Cell::Text(s)) => *s = evidence(s, map(maps, "movement"))?,
        (Rule::Refs, Cell::Text(s)) => {
            *s = refs(
                s,
                &[
                    ("(result ", map(maps, "count_result")),
                    ("(results ", map(maps, "count_result")),
                    ("(task ", map(maps, "count_task")),
                ],
            );
        }
        (Rule::AuditSubject, Cell::Text(s)) => *s = audit_subject(s, maps),
        (Rule::AuditDetail, Cell::Text(s)) => *s = audit_detail(s, maps)?,
        (rule, cell) => bail!("a {cell:?} where {rule:?} was expected"),
    }
    Ok(())
}

/// Rewrites the movement ids a result's evidence names. The evidence must read back
/// as the very text it was (else rewriting it could change more than its ids).
fn evidence(text: &str, movements: &IdMap) -> anyhow::Result<String> {
    let mut e = Evidence::parse(text).map_err(anyhow::Error::msg)?;
    if serde_json::to_string(&e)? != text {
        bail!("the stored evidence does not read back as written, so its ids cannot be rewritten");
    }
    let new = |id: i64| {
        movements
            .get(id)
            .with_context(|| format!("the evidence names movement {id}, not one of the site's"))
    };
    for m in &mut e.moves {
        m.id = new(m.id)?;
    }
    for m in &mut e.netting.moves_in_window {
        *m = MoveId(new(m.0)?);
    }
    for s in &mut e.netting.states {
        for m in &mut s.moves {
            *m = MoveId(new(m.0)?);
        }
    }
    Ok(serde_json::to_string(&e)?)
}

/// Rewrites each "PREFIX N" / "PREFIX N, M, …" of `text` through the map of its prefix;
/// an id the map does not hold becomes `?` (it named no row of the site).
fn refs(text: &str, prefixes: &[(&str, &IdMap)]) -> String {
    let mut out = String::with_capacity(text.len());
    let mut rest = text;
    'scan: while !rest.is_empty() {
        for (prefix, ids) in prefixes {
            if let Some(after) = rest.strip_prefix(prefix) {
                out.push_str(prefix);
                rest = numbers(after, ids, &mut out);
                continue 'scan;
            }
        }
        let ch = rest.chars().next().expect("rest is not empty");
        out.push(ch);
        rest = &rest[ch.len_utf8()..];
    }
    out
}

/// Rewrites the list of numbers `text` starts with ("12, 13"), writing to `out`;
/// returns what follows it.
fn numbers<'a>(mut text: &'a str, ids: &IdMap, out: &mut String) -> &'a str {
    loop {
        let digits = text.bytes().take_while(u8::is_ascii_digit).count();
        if digits == 0 {
            return text;
        }
        match text[..digits].parse::<i64>().ok().and_then(|n| ids.get(n)) {
            Some(n) => out.push_str(&n.to_string()),
            None => out.push('?'),
        }
        text = &text[digits..];
        match text.strip_prefix(", ") {
            Some(more) if more.starts_with(|c: char| c.is_ascii_digit()) => {
                out.push_str(", ");
                text = more;
            }
            _ => return text,
        }
    }
}

/// The audit subjects that name a row by id: "difference N" (a result), "device N",
/// "token N".
fn audit_subject(text: &str, maps: &Maps) -> String {
    for (word, table) in [
        ("difference ", "count_result"),
        ("device ", "device"),
        ("token ", "api_token"),
    ] {
        if let Some(old) = text.strip_prefix(word).and_then(|n| n.parse::<i64>().ok()) {
            return match map(maps, table).get(old) {
                Some(new) => format!("{word}{new}"),
                None => format!("{word}?"),
            };
        }
    }
    text.to_string()
}

/// The ids an audit detail names: `review`, `result`, `device_id`, `token_id`, and the
/// `site_id` of each of `roles` (another site of the file becomes null: it is not here).
fn audit_detail(text: &str, maps: &Maps) -> anyhow::Result<String> {
    const KEYS: &[(&str, &str)] = &[
        ("review", "count_review"),
        ("result", "count_result"),
        ("device_id", "device"),
        ("token_id", "api_token"),
    ];
    let mut v: serde_json::Value = match serde_json::from_str(text) {
        Ok(v) => v,
        Err(_) => return Ok(text.to_string()),
    };
    let Some(obj) = v.as_object_mut() else {
        return Ok(text.to_string());
    };
    if !KEYS.iter().any(|(k, _)| obj.contains_key(*k)) && !obj.contains_key("roles") {
        return Ok(text.to_string());
    }
    let new = |value: &serde_json::Value, table: &str| -> serde_json::Value {
        value
            .as_i64()
            .and_then(|old| map(maps, table).get(old))
            .map_or(serde_json::Value::Null, Into::into)
    };
    for (key, table) in KEYS {
        if let Some(value) = obj.get_mut(*key).filter(|v| v.is_i64()) {
            *value = new(value, table);
        }
    }
    if let Some(roles) = obj.get_mut("roles").and_then(|r| r.as_array_mut()) {
        for role in roles {
            if let Some(site) = role.get_mut("site_id") {
                *site = new(site, "site");
            }
        }
    }
    Ok(serde_json::to_string(&obj)?)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn maps() -> Maps {
        let mut m = Maps::new();
        m.insert("count_result", IdMap::of(vec![(12, 512), (13, 513)]));
        m.insert("count_task", IdMap::of(vec![(7, 907)]));
        m.insert("count_review", IdMap::of(vec![(3, 33)]));
        m.insert("device", IdMap::of(vec![(4, 44)]));
        m.insert("api_token", IdMap::of(vec![(5, 55)]));
        m.insert("site", IdMap::of(vec![(2, 9)]));
        m.insert("movement", IdMap::rising(&[10, 20, 30], &[110, 115, 190]));
        m
    }

    #[test]
    fn a_watermark_keeps_naming_the_site_movements_it_had_seen() {
        let m = maps();
        let moves = m.get("movement").unwrap();
        assert_eq!(moves.floor(5), 0);
        assert_eq!(moves.floor(20), 115);
        assert_eq!(moves.floor(29), 115);
        assert_eq!(moves.floor(99), 190);
    }

    #[test]
    fn result_and_task_ids_in_a_detail_are_rewritten_and_nothing_else() {
        let m = maps();
        let prefixes = [
            ("(result ", m.get("count_result").unwrap()),
            ("(results ", m.get("count_result").unwrap()),
            ("(task ", m.get("count_task").unwrap()),
        ];
        assert_eq!(
            refs(
                "recount of S12, S13 lot L7 (results 12, 13 and 4 more)",
                &prefixes
            ),
            "recount of S12, S13 lot L7 (results 512, 513 and 4 more)"
        );
        assert_eq!(
            refs(
                "[\"the recount of bin A-01 (task 7) was not counted (result 99)\"]",
                &prefixes
            ),
            "[\"the recount of bin A-01 (task 907) was not counted (result ?)\"]"
        );
        assert_eq!(
            refs("no ids (resultant 12)", &prefixes),
            "no ids (resultant 12)"
        );
    }

    #[test]
    fn audit_ids_are_rewritten_and_another_sites_become_null() {
        let m = maps();
        assert_eq!(audit_subject("difference 12", &m), "difference 512");
        assert_eq!(audit_subject("device 4", &m), "device 44");
        assert_eq!(audit_subject("token 6", &m), "token ?");
        assert_eq!(audit_subject("ada", &m), "ada");
        assert_eq!(
            audit_detail(r#"{"decision":"approved","result":12,"review":3}"#, &m).unwrap(),
            r#"{"decision":"approved","result":512,"review":33}"#
        );
        assert_eq!(
            audit_detail(
                r#"{"roles":[{"role":"admin","site_id":2},{"role":"counter","site_id":8}]}"#,
                &m
            )
            .unwrap(),
            r#"{"roles":[{"role":"admin","site_id":9},{"role":"counter","site_id":null}]}"#
        );
        assert_eq!(
            audit_detail(r#"{"written":3}"#, &m).unwrap(),
            r#"{"written":3}"#
        );
    }

    #[test]
    fn the_movements_an_evidence_names_are_rewritten_and_nothing_else() {
        let written = r#"{"sku":"S1","timing":{"first_scan":"2026-06-17T08:15:25.747Z","done":"2026-06-17T08:16:20.747Z","clock_uncertainty_ms":104},"history_from":"2026-06-17T08:15:25.643Z","balance_before":49,"netting":{"window":{"start":"2026-06-17T08:15:25.643Z","end":"2026-06-17T08:16:11.851Z"},"counted":48,"scanned":true,"opening":49,"states":[{"qty":49,"at":null,"moves":[]},{"qty":48,"at":"2026-06-17T08:15:30Z","moves":[20]}],"nearest":1,"f_star":48,"variance":0,"moves_in_window":[20],"status":"matches_state","post_at":"2026-06-17T08:15:25.642Z"},"moves":[{"id":20,"uid":"m-20","event_at":"2026-06-17T08:15:30Z","delta":-1,"kind":"pick","source":"host","uncertainty_ms":0}],"tolerance":{"units":null,"percent_bp":500,"value_minor":null},"judged":{"verdict":"exact"},"settles_at":"2026-06-17T08:16:20.851Z"}"#;
        let stored = serde_json::to_string(&Evidence::parse(written).unwrap()).unwrap();
        let m = maps();
        let moved = evidence(&stored, m.get("movement").unwrap()).unwrap();
        assert_eq!(
            moved,
            stored
                .replace("\"moves\":[20]", "\"moves\":[115]")
                .replace("\"moves_in_window\":[20]", "\"moves_in_window\":[115]")
                .replace("\"id\":20,", "\"id\":115,")
        );
        assert_ne!(moved, stored);
        assert!(evidence(&stored.replace("[20]", "[21]"), m.get("movement").unwrap()).is_err());
    }

    #[test]
    fn an_unknown_id_column_stops_the_copy() {
        assert!(rule("bin", "shelf_id").is_err());
        assert_eq!(
            rule("count_pass", "task_id").unwrap(),
            Rule::Id("count_task")
        );
        assert_eq!(rule("movement", "lot").unwrap(), Rule::Keep);
    }
}
