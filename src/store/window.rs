//! What the report reads a window at a time: the first pass over a window of the edit log
//! ([`Store::window_times`]: who edited when, without reading the edits' text, in a form the
//! report cuts down to what it keeps while it counts), and stretches of a mapper's history
//! ([`Store::mapper_changesets`], [`Store::mapper_work_between`]) for histories that follow
//! the part of the window being counted instead of holding every mapper's whole history.

use super::{edit_log, Store, StoreError};

/// Who edited when in a time window ([`Store::window_times`]).
#[derive(Debug, Default, Clone, PartialEq, Eq)]
pub struct WindowTimes {
    /// Per changeset, the hours of its first and last edit in the window, counted from the
    /// window's start (an hour past `u32::MAX` counts as `u32::MAX`).
    pub changeset_hours: foldhash::HashMap<i64, (u32, u32)>,
    /// Per mapper (uid), the time of their first edit in the window.
    pub mapper_first: foldhash::HashMap<i64, i64>,
    /// The time of the window's last edit, if it has any.
    pub last_ts: Option<i64>,
    /// Edits per hour of the window (repeated element versions counted each time).
    pub hourly: Vec<u64>,
}

impl Store {
    /// Who edited when in `from <= ts < to`, without reading the edits' text: the hours of each
    /// changeset's first and last edit, each mapper's first edit time (a repeated element version
    /// changes neither), the last edit time, and how many edits fall in each hour.
    ///
    /// # Errors
    /// On SQLite failure or a damaged block.
    pub fn window_times(&self, from: i64, to: i64) -> Result<WindowTimes, StoreError> {
        let hours = usize::try_from((to - from).max(0).div_euclid(3600) + 1).unwrap_or(0);
        let mut out = WindowTimes {
            hourly: vec![0; hours],
            ..WindowTimes::default()
        };
        self.for_each_edit_block(from, to, |data| {
            edit_log::scan(data, |changeset, uid, ts| {
                if ts < from || ts >= to {
                    return;
                }
                let hour = (ts - from) / 3600;
                if let Some(h) = usize::try_from(hour)
                    .ok()
                    .and_then(|h| out.hourly.get_mut(h))
                {
                    *h += 1;
                }
                let hour = u32::try_from(hour).unwrap_or(u32::MAX);
                let span = out.changeset_hours.entry(changeset).or_insert((hour, hour));
                *span = (span.0.min(hour), span.1.max(hour));
                let first = out.mapper_first.entry(uid).or_insert(ts);
                *first = (*first).min(ts);
                out.last_ts = Some(out.last_ts.map_or(ts, |l: i64| l.max(ts)));
            })
        })?;
        Ok(out)
    }

    /// The start time and id of each of a mapper's changesets started at `from` or later and
    /// before `to` (`None`: no end), by start time.
    ///
    /// # Errors
    /// On SQLite failure.
    pub fn mapper_changesets(
        &self,
        uid: i64,
        from: i64,
        to: Option<i64>,
    ) -> Result<Vec<(i64, i64)>, StoreError> {
        // No end is the largest time: one statement, both ends narrowing the index range.
        let mut st = self
            .conn
            .prepare_cached(
                "SELECT created_at, id FROM changesets
                 WHERE uid = ?1 AND created_at >= ?2 AND created_at < ?3 ORDER BY created_at",
            )
            .map_err(|e| self.map_err(e))?;
        let rows = st
            .query_map(rusqlite::params![uid, from, to.unwrap_or(i64::MAX)], |r| {
                Ok((r.get(0)?, r.get(1)?))
            })
            .map_err(|e| self.map_err(e))?;
        rows.collect::<Result<_, _>>().map_err(|e| self.map_err(e))
    }

    /// A mapper's changesets in the diffs whose first edit is at `from` or later and before
    /// `to` (`None`: no end), by first edit time: (first edit time, edits, deletions).
    ///
    /// # Errors
    /// On SQLite failure.
    pub fn mapper_work_between(
        &self,
        uid: i64,
        from: i64,
        to: Option<i64>,
    ) -> Result<Vec<(i64, u64, u64)>, StoreError> {
        let mut st = self
            .conn
            .prepare_cached(
                "SELECT first_ts, edits, deletes FROM changeset_work
                 WHERE uid = ?1 AND first_ts >= ?2 AND first_ts < ?3 ORDER BY first_ts, changeset",
            )
            .map_err(|e| self.map_err(e))?;
        let rows = st
            .query_map(rusqlite::params![uid, from, to.unwrap_or(i64::MAX)], |r| {
                Ok((
                    r.get::<_, i64>(0)?,
                    u64::try_from(r.get::<_, i64>(1)?).unwrap_or(0),
                    u64::try_from(r.get::<_, i64>(2)?).unwrap_or(0),
                ))
            })
            .map_err(|e| self.map_err(e))?;
        rows.collect::<Result<_, _>>().map_err(|e| self.map_err(e))
    }

    /// The start time of a mapper's first changeset, if any.
    ///
    /// # Errors
    /// On SQLite failure.
    pub fn mapper_first_changeset(&self, uid: i64) -> Result<Option<i64>, StoreError> {
        self.conn
            .prepare_cached("SELECT MIN(created_at) FROM changesets WHERE uid = ?1")
            .and_then(|mut st| st.query_row([uid], |r| r.get(0)))
            .map_err(|e| self.map_err(e))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// An osmChange file of node creations: (node id, changeset, uid, unix seconds).
    fn osc(edits: &[(i64, i64, i64, i64)]) -> String {
        let nodes: String = edits
            .iter()
            .map(|&(id, cs, uid, ts)| {
                let t = chrono::DateTime::from_timestamp(ts, 0)
                    .unwrap()
                    .format("%Y-%m-%dT%H:%M:%SZ");
                format!(
                    r#"<node id="{id}" version="1" changeset="{cs}" uid="{uid}" user="m{uid}" timestamp="{t}" lat="10.0" lon="20.0"/>"#
                )
            })
            .collect();
        format!(r#"<osmChange version="0.6"><create>{nodes}</create></osmChange>"#)
    }

    #[test]
    fn window_times_give_each_changesets_hours_and_each_mappers_first_edit() {
        let dir = tempfile::tempdir().unwrap();
        let mut store = Store::open(&dir.path().join("s.db")).unwrap();
        let from = 1_797_811_200; // a Monday
        let to = from + 604_800;
        let h = 3600;
        let edits = [
            // Before the window: counts nowhere.
            (1, 50, 7, from - 1),
            (2, 50, 7, from + 10),
            (3, 50, 7, from + 5 * h + 59),
            (4, 51, 8, from + 2 * h),
            (5, 52, 7, from + 3 * h),
            // The last second of the window, and the first one after it.
            (6, 53, 9, to - 1),
            (7, 53, 9, to),
        ];
        // Two files, the second repeating an element version of the first.
        let files = [
            (dir.path().join("a.osc"), osc(&edits[..4])),
            (
                dir.path().join("b.osc"),
                osc(&[edits[3], edits[4], edits[5], edits[6]]),
            ),
        ];
        for (p, text) in &files {
            std::fs::write(p, text).unwrap();
        }
        let paths: Vec<_> = files.iter().map(|f| f.0.clone()).collect();
        crate::ingest::ingest(&mut store, &paths, &crate::progress::Progress::silent()).unwrap();
        let w = store.window_times(from, to).unwrap();
        let last_hour = u32::try_from((to - 1 - from) / h).unwrap();
        let want: foldhash::HashMap<i64, (u32, u32)> = [
            (50, (0, 5)),
            (51, (2, 2)),
            (52, (3, 3)),
            (53, (last_hour, last_hour)),
        ]
        .into_iter()
        .collect();
        assert_eq!(w.changeset_hours, want);
        let want: foldhash::HashMap<i64, i64> = [(7, from + 10), (8, from + 2 * h), (9, to - 1)]
            .into_iter()
            .collect();
        assert_eq!(w.mapper_first, want);
        assert_eq!(w.last_ts, Some(to - 1));
        assert_eq!(w.hourly.len(), 169);
        let mut hourly = vec![0; 169];
        // The repeated version of node 4 is counted twice.
        for (hour, n) in [(0, 1), (5, 1), (2, 2), (3, 1), (167, 1)] {
            hourly[hour] = n;
        }
        assert_eq!(w.hourly, hourly);
        assert_eq!(
            store.window_times(to, to + 604_800).unwrap().last_ts,
            Some(to)
        );
    }
}
