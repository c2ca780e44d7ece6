//! Minutes a bin task takes: a base per bin plus a time per book line, and the
//! same learned from a zone's recent real counts once there are enough. No I/O.

use serde::{Deserialize, Serialize};

/// Real counts a zone needs before its own times replace the site's settings.
pub const MIN_SAMPLES: usize = 20;
/// Most recent counts per zone the learned time is taken from.
pub const RECENT_SAMPLES: usize = 200;

/// Time per bin task: `base_s + per_line_s * lines`, in seconds.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, utoipa::ToSchema)]
pub struct TaskTime {
    pub base_s: u32,
    pub per_line_s: u32,
}

impl Default for TaskTime {
    /// Returns 2 minutes per bin plus 30 s per line (common practice, no source).
    fn default() -> Self {
        Self {
            base_s: 120,
            per_line_s: 30,
        }
    }
}

impl TaskTime {
    /// Returns the estimated seconds for a bin with `lines` book lines (an empty bin still takes the base).
    pub fn seconds(self, lines: u32) -> i64 {
        i64::from(self.base_s) + i64::from(self.per_line_s) * i64::from(lines)
    }
}

/// One finished real count: how many lines the bin had and how long it took.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Sample {
    pub lines: u32,
    pub seconds: u32,
}

/// Returns a zone's task time: the setting until the zone has [`MIN_SAMPLES`]
/// real counts; then the base becomes the median of each recent count's time
/// less its lines' share, so one slow or abandoned count cannot move it much.
/// `recent` is newest first; only the first [`RECENT_SAMPLES`] are used.
pub fn learned(setting: TaskTime, recent: &[Sample]) -> TaskTime {
    let recent = &recent[..recent.len().min(RECENT_SAMPLES)];
    if recent.len() < MIN_SAMPLES {
        return setting;
    }
    let mut base: Vec<i64> = recent
        .iter()
        .map(|s| (i64::from(s.seconds) - i64::from(setting.per_line_s) * i64::from(s.lines)).max(0))
        .collect();
    base.sort_unstable();
    let mid = base.len() / 2;
    let median = if base.len() % 2 == 1 {
        base[mid]
    } else {
        (base[mid - 1] + base[mid]) / 2
    };
    TaskTime {
        base_s: u32::try_from(median).unwrap_or(u32::MAX),
        per_line_s: setting.per_line_s,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_task_takes_the_base_plus_its_lines() {
        let t = TaskTime {
            base_s: 60,
            per_line_s: 20,
        };
        assert_eq!(t.seconds(0), 60);
        assert_eq!(t.seconds(3), 120);
    }

    #[test]
    fn too_few_real_counts_keep_the_setting() {
        let s = TaskTime::default();
        let few = vec![
            Sample {
                lines: 1,
                seconds: 999
            };
            MIN_SAMPLES - 1
        ];
        assert_eq!(learned(s, &few), s);
    }

    #[test]
    fn enough_real_counts_give_the_median_base_and_ignore_an_outlier() {
        let s = TaskTime {
            base_s: 120,
            per_line_s: 30,
        };
        let mut samples: Vec<Sample> = (0..MIN_SAMPLES as u32)
            .map(|i| Sample {
                lines: 2,
                seconds: 60 + 60 + i % 3,
            })
            .collect();
        samples[0].seconds = 5_000; // an abandoned count
        // Bases are 60, 61, 62 repeating (and one huge): the median is 61.
        assert_eq!(
            learned(s, &samples),
            TaskTime {
                base_s: 61,
                per_line_s: 30
            }
        );
    }
}
