//! How far each counter is with the day's list: tasks and estimated minutes
//! not started, in progress and done, per run and for the day. No I/O; the
//! supervisor's page shows it and its live refresh polls it as JSON.

use super::ListView;
use serde::Serialize;

/// Where a task stands, from its stored status.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, utoipa::ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum Stage {
    /// `open`: nobody has opened the bin yet.
    NotStarted,
    /// `started`: a phone has opened the bin.
    InProgress,
    /// `done`: the bin is marked done.
    Done,
}

impl Stage {
    /// Reads a stored status; anything unknown counts as not started, so a
    /// new status never hides work that is still to do.
    pub fn of(status: &str) -> Self {
        match status {
            "done" => Stage::Done,
            "started" => Stage::InProgress,
            _ => Stage::NotStarted,
        }
    }

    /// Returns the wire form (also the page's style class).
    pub fn key(self) -> &'static str {
        match self {
            Stage::NotStarted => "not_started",
            Stage::InProgress => "in_progress",
            Stage::Done => "done",
        }
    }

    /// Returns the words the page shows.
    pub fn label(self) -> &'static str {
        match self {
            Stage::NotStarted => "not started",
            Stage::InProgress => "in progress",
            Stage::Done => "done",
        }
    }
}

/// Tasks and their estimated seconds in one stage.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct Tally {
    pub tasks: usize,
    pub est_s: i64,
}

impl Tally {
    fn add(&mut self, est_s: i64) {
        self.tasks += 1;
        self.est_s += est_s;
    }
}

/// One run's (or the whole day's) progress.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct RunProgress {
    /// The run number; 0 for the day's total.
    pub run: u32,
    pub holder: String,
    pub not_started: Tally,
    pub in_progress: Tally,
    pub done: Tally,
    /// Share of the run's estimated seconds that is done, 0 to 100, rounded down.
    pub done_pct: u32,
}

impl RunProgress {
    fn add(&mut self, stage: Stage, est_s: i64) {
        match stage {
            Stage::NotStarted => self.not_started.add(est_s),
            Stage::InProgress => self.in_progress.add(est_s),
            Stage::Done => self.done.add(est_s),
        }
    }

    fn finish(&mut self) {
        let all = self.not_started.est_s + self.in_progress.est_s + self.done.est_s;
        self.done_pct = if all > 0 {
            u32::try_from(self.done.est_s * 100 / all).unwrap_or(100)
        } else {
            0
        };
    }
}

/// One task's stage and run, so a page can update its row in place.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct TaskStage {
    pub id: i64,
    pub run: u32,
    pub stage: Stage,
}

/// The day's progress as the page and its live refresh show it.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, utoipa::ToSchema)]
#[schema(as = ListProgress)]
pub struct Progress {
    pub day: chrono::NaiveDate,
    pub version: i64,
    pub runs: Vec<RunProgress>,
    pub total: RunProgress,
    pub tasks: Vec<TaskStage>,
}

/// Tallies a stored list's tasks by run and stage.
pub fn of(list: &ListView) -> Progress {
    let mut runs: Vec<RunProgress> = list
        .runs
        .iter()
        .map(|r| RunProgress {
            run: r.run,
            holder: r.holder.clone(),
            ..RunProgress::default()
        })
        .collect();
    let mut total = RunProgress::default();
    let mut tasks = Vec::with_capacity(list.tasks.len());
    for t in &list.tasks {
        let stage = Stage::of(&t.status);
        if let Some(r) = runs.iter_mut().find(|r| r.run == t.run) {
            r.add(stage, t.est_s);
        }
        total.add(stage, t.est_s);
        if let Some(id) = t.id {
            tasks.push(TaskStage {
                id,
                run: t.run,
                stage,
            });
        }
    }
    for r in &mut runs {
        r.finish();
    }
    total.finish();
    Progress {
        day: list.day,
        version: list.version,
        runs,
        total,
        tasks,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::planning::{RunView, Summary, TaskView};

    fn task(id: i64, run: u32, est_s: i64, status: &str) -> TaskView {
        TaskView {
            id: Some(id),
            seq: id as u32,
            run,
            bin: format!("A-01-{id:02}-1"),
            zone: "A".into(),
            aisle: 1,
            bay: id as u16,
            level: 1,
            reason: "due".into(),
            class: None,
            detail: String::new(),
            lines: 1,
            est_s,
            status: status.into(),
            why: None,
        }
    }

    fn list(tasks: Vec<TaskView>) -> ListView {
        let mut v = ListView {
            day: chrono::NaiveDate::from_ymd_opt(2026, 3, 3).unwrap(),
            stored: true,
            version: 4,
            counters: 2,
            minutes: 60,
            level_s: 0,
            watermark: 0,
            warnings: Vec::new(),
            runs: Vec::<RunView>::new(),
            summary: Summary::default(),
            tasks,
        };
        v.tally(&["ada".into(), String::new()]);
        v
    }

    #[test]
    fn each_run_counts_its_tasks_and_minutes_by_stage() {
        let p = of(&list(vec![
            task(1, 1, 120, "done"),
            task(2, 1, 90, "started"),
            task(3, 1, 90, "open"),
            task(4, 2, 60, "open"),
        ]));
        let r1 = &p.runs[0];
        assert_eq!((r1.run, r1.holder.as_str()), (1, "ada"));
        assert_eq!(
            (r1.not_started, r1.in_progress, r1.done),
            (
                Tally {
                    tasks: 1,
                    est_s: 90
                },
                Tally {
                    tasks: 1,
                    est_s: 90
                },
                Tally {
                    tasks: 1,
                    est_s: 120
                }
            )
        );
        // 120 of 300 seconds done.
        assert_eq!(r1.done_pct, 40);
        assert_eq!(p.runs[1].not_started.tasks, 1);
        assert_eq!(p.runs[1].done_pct, 0);
        assert_eq!(
            (
                p.total.not_started.tasks,
                p.total.in_progress.tasks,
                p.total.done.tasks
            ),
            (2, 1, 1)
        );
        assert_eq!(p.total.done_pct, 33, "120 of 360 seconds, rounded down");
        assert_eq!(p.tasks[1].stage, Stage::InProgress);
        assert_eq!(p.version, 4);
    }

    #[test]
    fn an_empty_run_is_zero_percent_done_and_an_unknown_status_is_work_to_do() {
        let p = of(&list(vec![task(1, 1, 60, "paused")]));
        assert_eq!(p.runs[0].not_started.tasks, 1);
        assert_eq!(
            p.runs[1],
            RunProgress {
                run: 2,
                ..RunProgress::default()
            }
        );
    }
}
