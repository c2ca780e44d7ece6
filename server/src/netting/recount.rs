//! Where a recount goes (DESIGN §5): the out-of-tolerance keys of one count pass go to one
//! recount task for the bin, on the list of the count's local day (made if there is none),
//! at the head of a run held by someone other than the first counter — else a run held by
//! no one, with a warning on the list. A supervisor count goes to a run held by no one. A
//! key sent again while the bin's task is still open joins that task. The store answers
//! the queries of [`RecountTx`].

use super::results::{PassFacts, Sent};
use super::service::{self, Placement};
use crate::master::SiteId;
use crate::planning::abc::Class;
use crate::store::error::StoreError;

/// Estimated seconds of a recount task when the first task's estimate is unknown.
pub const RECOUNT_EST_S: i64 = 120;
/// Most keys a task's detail names before it says "and N more".
const MAX_DETAIL_KEYS: usize = 10;

/// A day's count list as placement needs it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct DayList {
    pub id: i64,
    pub counters: u32,
    pub warnings: Vec<String>,
}

/// A run of a list: its number, holder (empty when no one) and tasks not done.
pub type RunLoad = (u32, String, u32);

/// A recount task to write.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct NewRecountTask {
    pub list: i64,
    pub bin: i64,
    pub run: u32,
    pub class: Option<Class>,
    pub lines: i64,
    pub est_s: i64,
    /// The first result it re-checks.
    pub recount_of: i64,
    pub supervisor: bool,
}

/// One result a task re-checks, for the task's detail text.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Rechecked {
    pub result: i64,
    pub sku: String,
    pub lot: String,
}

/// A result sent to a recount, as placing it needs it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SentResult {
    pub key: Rechecked,
    pub class: Option<Class>,
}

/// What placing one pass's recount reads before it decides anything.
#[derive(Debug, Clone, PartialEq)]
pub struct PlacementRead {
    /// The open task of that kind no phone has begun, with its list.
    pub open_task: Option<(i64, i64)>,
    /// The results sent, oldest first, with their keys and classes.
    pub results: Vec<SentResult>,
    /// The keys with a non-zero balance in the bin.
    pub bin_lines: i64,
    /// The list of the count's local day with its runs, if there is one.
    pub plan: Option<(DayList, Vec<RunLoad>)>,
}

/// The queries and writes of placing a recount; each method one query or one write,
/// except the three that take a step's worth at once ([`RecountTx::placement_read`],
/// [`RecountTx::day_plan`], [`RecountTx::write_recount_task`]), whose defaults call the
/// one-at-a-time methods: placing a new recount is one read and one write.
pub trait RecountTx {
    /// The open task of that kind (recount or supervisor count) of pass `pass` that no
    /// phone has begun, with its list.
    fn open_task_of(&self, pass: i64, supervisor: bool) -> Result<Option<(i64, i64)>, StoreError>;
    /// Links results to a task (a result already linked stays once).
    fn link_rechecks(&self, task: i64, results: &[i64]) -> Result<(), StoreError>;
    /// The results a task re-checks, oldest first.
    fn rechecked(&self, task: i64) -> Result<Vec<Rechecked>, StoreError>;
    fn set_task_detail(&self, task: i64, detail: &str) -> Result<(), StoreError>;
    /// Raises a list's version, so phones and pages fetch it again.
    fn bump_list(&self, list: i64) -> Result<(), StoreError>;
    /// The list of a local day at a site, if there is one.
    fn day_list(&self, site: SiteId, day: &str) -> Result<Option<DayList>, StoreError>;
    /// Makes a day's list with one run held by no one.
    fn create_day_list(
        &self,
        site: SiteId,
        day: &str,
        minutes: i64,
        sent: &Sent,
    ) -> Result<DayList, StoreError>;
    fn runs(&self, list: i64) -> Result<Vec<RunLoad>, StoreError>;
    /// Adds run `run` to a list (and raises its counters to it).
    fn add_run(&self, list: i64, run: u32) -> Result<(), StoreError>;
    /// The results named, oldest first, with their keys and classes.
    fn sent_results(&self, results: &[i64]) -> Result<Vec<SentResult>, StoreError>;
    /// The keys with a non-zero balance in a bin.
    fn bin_lines(&self, bin: i64) -> Result<i64, StoreError>;
    /// Writes a recount task after the run's recounts already there (everything after it
    /// moves down one place); returns its id.
    fn insert_recount_task(&self, t: &NewRecountTask) -> Result<i64, StoreError>;
    fn set_list_warnings(&self, list: i64, warnings: &[String]) -> Result<(), StoreError>;

    /// What placing `results` (first results of pass `pass`, in bin `bin` at `site`, counted
    /// on the local day `day`) needs to know first; the open task only when `find_open`
    /// (the caller may know there is none).
    #[allow(clippy::too_many_arguments)]
    fn placement_read(
        &self,
        site: SiteId,
        pass: i64,
        bin: i64,
        results: &[i64],
        supervisor: bool,
        find_open: bool,
        day: &str,
    ) -> Result<PlacementRead, StoreError> {
        Ok(PlacementRead {
            open_task: if find_open {
                self.open_task_of(pass, supervisor)?
            } else {
                None
            },
            results: self.sent_results(results)?,
            bin_lines: self.bin_lines(bin)?,
            plan: self.day_plan(site, day)?,
        })
    }
    /// The list of a local day at a site with its runs, if there is one.
    fn day_plan(
        &self,
        site: SiteId,
        day: &str,
    ) -> Result<Option<(DayList, Vec<RunLoad>)>, StoreError> {
        match self.day_list(site, day)? {
            Some(list) => {
                let runs = self.runs(list.id)?;
                Ok(Some((list, runs)))
            }
            None => Ok(None),
        }
    }
    /// Writes a new recount task with its detail, links `results` to it and raises its
    /// list's version; returns its id.
    fn write_recount_task(
        &self,
        t: &NewRecountTask,
        results: &[i64],
        detail: &str,
    ) -> Result<i64, StoreError> {
        let task = self.insert_recount_task(t)?;
        self.link_rechecks(task, results)?;
        self.set_task_detail(task, detail)?;
        self.bump_list(t.list)?;
        Ok(task)
    }
}

/// Sends first results of one pass to a recount (or a supervisor count) of its bin: into
/// the open task of that kind no phone has begun yet, if the pass has one, else into a
/// new task. Returns the task added, if one was. `may_have_open` is false when the caller
/// knows the pass has no task open (not done, not withdrawn, not counted against): then
/// there is none to look for.
pub fn send<T: RecountTx + ?Sized>(
    tx: &T,
    pass: &PassFacts,
    results: &[i64],
    supervisor: bool,
    sent: &Sent,
    may_have_open: bool,
) -> Result<Vec<i64>, StoreError> {
    if results.is_empty() {
        return Ok(Vec::new());
    }
    // The site's local day of the count, not the UTC one (a count at 23:30 in Chicago is
    // recounted on that day's list).
    let done = pass.timing.done.unwrap_or(pass.timing.first_scan);
    let day = pass.zone.day_of(done).format("%Y-%m-%d").to_string();
    let read = tx.placement_read(
        pass.site,
        pass.id,
        pass.bin_id,
        results,
        supervisor,
        may_have_open,
        &day,
    )?;
    match read.open_task {
        Some((task, list)) => {
            tx.link_rechecks(task, results)?;
            tx.set_task_detail(task, &detail(&tx.rechecked(task)?, supervisor))?;
            tx.bump_list(list)?;
            Ok(Vec::new())
        }
        None => Ok(vec![add_task(
            tx, pass, read, &day, results, supervisor, sent,
        )?]),
    }
}

/// Writes what a task re-checks, for the supervisor's list: the keys and their results.
fn detail(rows: &[Rechecked], supervisor: bool) -> String {
    let keys: Vec<String> = rows
        .iter()
        .take(MAX_DETAIL_KEYS)
        .map(|r| {
            if r.lot.is_empty() {
                r.sku.clone()
            } else {
                format!("{} lot {}", r.sku, r.lot)
            }
        })
        .collect();
    let more = rows.len().saturating_sub(MAX_DETAIL_KEYS);
    let more = if more > 0 {
        format!(" and {more} more")
    } else {
        String::new()
    };
    let ids: Vec<String> = rows
        .iter()
        .take(MAX_DETAIL_KEYS)
        .map(|r| r.result.to_string())
        .collect();
    let what = if supervisor {
        "supervisor count"
    } else {
        "recount"
    };
    let s = if rows.len() == 1 { "" } else { "s" };
    format!(
        "{what} of {}{more} (result{s} {}{more})",
        keys.join(", "),
        ids.join(", ")
    )
}

/// Adds a recount task for `results` (first results of one pass) to the list of the
/// pass's local done day `day`, ahead of its run. Returns the task's id.
fn add_task<T: RecountTx + ?Sized>(
    tx: &T,
    pass: &PassFacts,
    read: PlacementRead,
    day: &str,
    results: &[i64],
    supervisor: bool,
    sent: &Sent,
) -> Result<i64, StoreError> {
    let (list, runs) = match read.plan {
        Some(plan) => plan,
        None => {
            let list =
                tx.create_day_list(pass.site, day, RECOUNT_EST_S.div_euclid(60).max(1), sent)?;
            let runs = tx.runs(list.id)?;
            (list, runs)
        }
    };
    let placement = if supervisor {
        let run = runs
            .iter()
            .filter(|(_, h, _)| h.is_empty())
            .map(|(r, _, _)| *r)
            .min()
            .unwrap_or(list.counters + 1);
        Placement::Unassigned {
            run,
            warning: String::new(),
        }
    } else {
        service::place_recount(&runs, &pass.user_name, list.counters + 1)
    };
    let (run, warning) = match placement {
        Placement::Run(r) => (r, None),
        Placement::Unassigned { run, warning } => (run, Some(warning)),
    };
    if run > list.counters {
        tx.add_run(list.id, run)?;
    }
    // The task is as important as the most important key it re-checks.
    let class = read.results.iter().filter_map(|r| r.class).min();
    let keys: Vec<Rechecked> = read.results.into_iter().map(|r| r.key).collect();
    let detail = detail(&keys, supervisor);
    let task = tx.write_recount_task(
        &NewRecountTask {
            list: list.id,
            bin: pass.bin_id,
            run,
            class,
            lines: read.bin_lines.max(1),
            est_s: pass.task_est_s.unwrap_or(RECOUNT_EST_S),
            recount_of: results[0],
            supervisor,
        },
        results,
        &detail,
    )?;
    let warning = warning.map(|w| {
        if supervisor {
            format!(
                "supervisor count of {} for {}: the recount agreed with neither the first \
                 count nor the book; run {run} is held by no one",
                pass.bin_code,
                detail.trim_start_matches("supervisor count of ")
            )
        } else {
            w
        }
    });
    if let Some(w) = warning {
        // Said once per run and counter, however many recounts wait there.
        if !list.warnings.contains(&w) {
            let mut all = list.warnings.clone();
            all.push(w);
            tx.set_list_warnings(list.id, &all)?;
        }
    }
    Ok(task)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_detail_names_ten_keys_then_says_how_many_more() {
        let rows: Vec<Rechecked> = (1..=12)
            .map(|i| Rechecked {
                result: i,
                sku: format!("S{i}"),
                lot: if i == 2 { "L7".into() } else { String::new() },
            })
            .collect();
        let d = detail(&rows, false);
        assert!(d.starts_with("recount of S1, S2 lot L7, S3"), "{d}");
        assert!(d.contains("S10 and 2 more (results 1, 2"), "{d}");
        assert!(d.ends_with("9, 10 and 2 more)"), "{d}");
        assert_eq!(
            detail(&rows[..1], true),
            "supervisor count of S1 (result 1)"
        );
    }
}
