//! Evidence about each changeset, in three families (the field's published practice):
//! its metadata, its mapper's history at the time, and its individual edits.
//!
//! Per-edit facts ([`EditFacts`]) are computed once here and reused by the cell aggregates, so a
//! "spam-like rename" means the same thing in a changeset's reasons and in a cell's count.
//! [`FEATURES`] is the one numeric feature vector the fitted models read; its table, with each
//! feature's meaning, is in `docs/features.md`.

use std::collections::HashMap;
use std::hash::BuildHasher;

use crate::labels::{RevertIndex, RevertedBy};
use crate::land::Land;
use crate::locate::{load_edits, ChangesetMeta, Edit};
use crate::model::{ElementType, Op};
use crate::progress::Progress;
use crate::store::{packed_tag, unpack_tags, Store, StoreError};

/// Tunables of the evidence.
#[derive(Debug, Clone, Copy)]
pub struct FeatureConfig {
    /// An account younger than this many days at the edit is a newcomer.
    pub newcomer_days: f64,
    /// A non-maritime object created in water this far from land (metres) counts as offshore.
    pub offshore_min_m: f64,
    /// A node moved at least this far (metres) by one modification is a large move.
    pub large_move_m: f64,
    /// A deleted object unchanged for at least this many days counts as old.
    pub old_object_days: f64,
}

impl Default for FeatureConfig {
    fn default() -> Self {
        Self {
            newcomer_days: 30.0,
            offshore_min_m: 500.0,
            large_move_m: 100.0,
            old_object_days: 365.0,
        }
    }
}

/// Keys and key=value pairs of objects that legitimately lie in water: seamarks, buoys,
/// platforms, reefs, islands, coastline, water areas, piers, ferry routes. The one list the
/// offshore evidence uses. (Common practice in OSM tagging, no single source.)
const MARITIME_KEY_PREFIXES: &[&str] = &["seamark:", "waterway", "harbour", "water", "maritime"];
const MARITIME_TAGS: &[(&str, &str)] = &[
    ("natural", "water"),
    ("natural", "coastline"),
    ("natural", "bay"),
    ("natural", "strait"),
    ("natural", "reef"),
    ("natural", "shoal"),
    ("natural", "beach"),
    ("natural", "sand"),
    ("natural", "rock"),
    ("natural", "bare_rock"),
    ("natural", "cape"),
    ("place", "island"),
    ("place", "islet"),
    ("place", "sea"),
    ("place", "ocean"),
    ("man_made", "pier"),
    ("man_made", "breakwater"),
    ("man_made", "groyne"),
    ("man_made", "lighthouse"),
    ("man_made", "offshore_platform"),
    ("man_made", "pipeline"),
    ("man_made", "beacon"),
    ("man_made", "buoy"),
    ("power", "cable"),
    ("power", "generator"),
    ("power", "tower"),
    ("route", "ferry"),
    ("amenity", "ferry_terminal"),
    ("leisure", "marina"),
    ("leisure", "slipway"),
    ("boundary", "maritime"),
    ("boundary", "administrative"),
];

/// Whether packed tags describe an object that may legitimately lie in water.
#[must_use]
pub fn is_maritime(tags: &str) -> bool {
    unpack_tags(tags).any(|(k, v)| {
        MARITIME_KEY_PREFIXES.iter().any(|p| k.starts_with(p))
            || MARITIME_TAGS.iter().any(|&(mk, mv)| mk == k && mv == v)
    })
}

/// Whether a name looks like an advert: it holds a web address or a phone number.
#[must_use]
pub fn is_spam_like(name: &str) -> bool {
    let lower = name.to_lowercase();
    if lower.contains("http://") || lower.contains("https://") || lower.contains("www.") {
        return true;
    }
    // A word with a dot followed by a common top-level domain.
    const TLDS: &[&str] = &[
        "com", "net", "org", "info", "biz", "shop", "xyz", "online", "site", "club", "top", "io",
        "example", "store", "ru", "cn", "co",
    ];
    for word in lower.split(|c: char| c.is_whitespace() || c == ',' || c == '(' || c == ')') {
        if let Some((head, tld)) = word.trim_end_matches(['/', '!', '.']).rsplit_once('.') {
            if !head.is_empty() && TLDS.contains(&tld.trim_end_matches('/')) {
                return true;
            }
        }
    }
    // Seven or more digits in one run of digits and phone punctuation.
    let mut digits = 0;
    for c in name.chars() {
        if c.is_ascii_digit() {
            digits += 1;
            if digits >= 7 {
                return true;
            }
        } else if !matches!(c, ' ' | '-' | '.' | '(' | ')' | '+' | '/') {
            digits = 0;
        }
    }
    false
}

/// Facts about one edit.
#[derive(Debug, Clone, Copy, Default)]
pub struct EditFacts {
    /// The mapper's account was younger than the newcomer threshold.
    pub newcomer: bool,
    /// The name changed (both versions known and different).
    pub name_changed: bool,
    /// The new name looks like an advert, and differs from the old one.
    pub spam_name: bool,
    /// An existing object renamed to advert-like text (a modification, not a creation).
    pub spam_rename: bool,
    /// A deleted object in its own right: a way, a relation or a tagged node (not the untagged
    /// vertices that go with a deleted way). Nodes whose earlier tags are unknown count.
    pub deleted_feature: bool,
    /// A non-maritime tagged object created in water far from land.
    pub offshore_create: bool,
    /// Any object created at a place the land layer calls water (maritime or not).
    pub water_create: bool,
    /// Distance from land of an offshore creation, metres.
    pub offshore_m: f64,
    /// Three or more tags removed by a modification.
    pub tags_stripped: bool,
    /// Deletion of an object that had five or more versions.
    pub deleted_mature: bool,
    /// Deletion of an object unchanged for [`FeatureConfig::old_object_days`] or more.
    pub deleted_old: bool,
    /// A node moved [`FeatureConfig::large_move_m`] or more.
    pub large_move: bool,
    /// A non-maritime tagged object created where no data existed nearby before its changeset
    /// (see [`ExistingData`]).
    pub far_create: bool,
}

/// Where map data existed, and since when: for each 0.01° × 0.01° grid square
/// ([`crate::store::grid_square`]), the time of the first node known there (nodes met in the
/// snapshot or first met in an edit count as always there; a snapshot node of version 1 from
/// its creation). A creation is "far from existing data" when the square it lies in and its
/// eight neighbours (about 3 km across) held no node before its changeset began.
#[derive(Debug, Default, Clone)]
pub struct ExistingData {
    first: foldhash::HashMap<i64, i64>,
}

impl ExistingData {
    /// Reads the squares' first-node times, which every ingest keeps up to date.
    ///
    /// # Errors
    /// On database failure.
    pub fn load(store: &Store) -> Result<Self, StoreError> {
        Ok(Self {
            first: store.grid_first()?.into_iter().collect(),
        })
    }

    /// Whether no node existed before `t` within about 1.5 km of `p` (the grid square and its
    /// neighbours). Always false when nothing was loaded.
    #[must_use]
    pub fn is_far(&self, p: crate::model::Coord, t: i64) -> bool {
        if self.first.is_empty() {
            return false;
        }
        let centre = crate::store::grid_square(p.lat_e7(), p.lon_e7());
        (-1..=1).all(|dr: i64| {
            (-1..=1).all(|dc: i64| {
                let sq = centre + dr * 65_536 + dc;
                !matches!(self.first.get(&sq), Some(&f) if f < t)
            })
        })
    }
}

/// The mappers' histories: each mapper's changeset start times (from changeset metadata), their
/// earlier edits (from the diffs) and which of their changesets were reverted (from revert
/// comments).
///
/// Loaded whole for a set of mappers ([`MapperHistory::load`]), or a stretch of time at a time
/// ([`MapperHistory::prepare`]): a mapper's changesets before the stretch held are folded into
/// counts, those after it are not read yet, so memory follows the stretch, not the history.
/// The answers are the same either way.
#[derive(Debug, Default)]
pub struct MapperHistory {
    mappers: foldhash::HashMap<i64, Mapper>,
    /// Mappers read again from their start because a question came from before what was held.
    reloads: u64,
}

/// One mapper's history: changesets started before `held_from` folded into counts, those up to
/// `loaded_to` held (the work in the diffs likewise, by first edit time).
#[derive(Debug)]
struct Mapper {
    /// Start time of the mapper's first changeset, if any.
    first_seen: Option<i64>,
    /// Changesets and work before this time are folded into the counts below.
    held_from: i64,
    /// Changesets and work before this time are read (`None`: all of them).
    loaded_to: Option<i64>,
    /// Changesets folded.
    created_before: usize,
    /// Distinct ISO weeks among the changesets folded.
    weeks_before: u32,
    /// Start times of the changesets held, ascending.
    created: Vec<i64>,
    /// Aligned with `created`: distinct ISO weeks among the changesets up to and including each
    /// one, the folded ones included.
    weeks_upto: Vec<u32>,
    /// Distinct weeks among all changesets read, and the week of the last one.
    weeks_read: u32,
    last_week: Option<i64>,
    /// Edits and deletions of the work folded.
    work_before: (u64, u64),
    /// Per changeset in the diffs, by first edit time: (first edit time, edits so far, deletions
    /// so far), the folded work included.
    work: Vec<(i64, u64, u64)>,
    /// Edits and deletions of all work read.
    work_read: (u64, u64),
    /// How each reverted changeset read was reverted, by changeset start time.
    reverted: Vec<(i64, RevertedBy)>,
}

impl Mapper {
    /// Nothing read yet, the first changeset's time aside.
    fn new(first_seen: Option<i64>) -> Self {
        Self {
            first_seen,
            held_from: i64::MIN,
            loaded_to: Some(i64::MIN),
            created_before: 0,
            weeks_before: 0,
            created: Vec::new(),
            weeks_upto: Vec::new(),
            weeks_read: 0,
            last_week: None,
            work_before: (0, 0),
            work: Vec::new(),
            work_read: (0, 0),
            reverted: Vec::new(),
        }
    }

    /// Reads the changesets and work from `loaded_to` up to `to` (`None`: all).
    fn read_to(
        &mut self,
        store: &Store,
        uid: i64,
        reverts: &RevertIndex,
        to: Option<i64>,
    ) -> Result<(), StoreError> {
        let Some(from) = self.loaded_to else {
            return Ok(());
        };
        if to.is_some_and(|to| to <= from) {
            return Ok(());
        }
        for (t, id) in store.mapper_changesets(uid, from, to)? {
            self.push_changeset(t, reverts.reverted(id));
        }
        for (t, n, d) in store.mapper_work_between(uid, from, to)? {
            self.work_read.0 += n;
            self.work_read.1 += d;
            self.work.push((t, self.work_read.0, self.work_read.1));
        }
        self.loaded_to = to;
        Ok(())
    }

    /// Adds a changeset started at `t`, after those read so far.
    fn push_changeset(&mut self, t: i64, reverted: Option<RevertedBy>) {
        if let Some(r) = reverted {
            self.reverted.push((t, r));
        }
        // Monday 1970-01-05, four days (345 600 s) after the epoch, starts a week.
        let w = (t - 345_600).div_euclid(604_800);
        if self.last_week != Some(w) {
            self.weeks_read += 1;
            self.last_week = Some(w);
        }
        self.created.push(t);
        self.weeks_upto.push(self.weeks_read);
    }

    /// Folds the changesets and work before `t` into the counts.
    fn fold_before(&mut self, t: i64) {
        if t <= self.held_from {
            return;
        }
        let k = self.created.partition_point(|&c| c < t);
        if let Some(&w) = k.checked_sub(1).and_then(|i| self.weeks_upto.get(i)) {
            self.weeks_before = w;
        }
        self.created_before += k;
        self.created.drain(..k);
        self.weeks_upto.drain(..k);
        let j = self.work.partition_point(|x| x.0 < t);
        if let Some(&(_, n, d)) = j.checked_sub(1).and_then(|i| self.work.get(i)) {
            self.work_before = (n, d);
        }
        self.work.drain(..j);
        self.held_from = t;
    }
}

impl MapperHistory {
    /// Loads the whole history of the given mappers.
    ///
    /// # Errors
    /// On database failure.
    pub fn load(
        store: &Store,
        uids: impl IntoIterator<Item = i64>,
        reverts: &RevertIndex,
    ) -> Result<Self, StoreError> {
        let mut out = Self::default();
        for uid in uids {
            let mut m = Mapper::new(store.mapper_first_changeset(uid)?);
            m.read_to(store, uid, reverts, None)?;
            out.mappers.insert(uid, m);
        }
        Ok(out)
    }

    /// Makes the history answer for each `(uid, since)` of `asked` at any time from `since` up
    /// to `to`: reads each mapper's changesets and work up to `to + stretch` when `to` is past
    /// what was read, reads a mapper again from the start when `since` is before what is held
    /// (counted in [`MapperHistory::reloads`]), and folds into counts what lies more than
    /// `stretch` seconds before `since`. Mappers not asked about keep what they hold.
    ///
    /// # Errors
    /// On database failure.
    pub fn prepare(
        &mut self,
        store: &Store,
        reverts: &RevertIndex,
        asked: impl IntoIterator<Item = (i64, i64)>,
        to: i64,
        stretch: i64,
    ) -> Result<(), StoreError> {
        for (uid, since) in asked {
            let m = match self.mappers.entry(uid) {
                std::collections::hash_map::Entry::Occupied(o) => o.into_mut(),
                std::collections::hash_map::Entry::Vacant(v) => {
                    v.insert(Mapper::new(store.mapper_first_changeset(uid)?))
                }
            };
            if since < m.held_from {
                *m = Mapper::new(m.first_seen);
                self.reloads += 1;
            }
            if m.loaded_to.is_some_and(|l| l < to) {
                m.read_to(store, uid, reverts, Some(to.saturating_add(stretch.max(0))))?;
            }
            m.fold_before(since.saturating_sub(stretch.max(0)));
        }
        Ok(())
    }

    /// How many times [`MapperHistory::prepare`] read a mapper again from the start.
    #[must_use]
    pub fn reloads(&self) -> u64 {
        self.reloads
    }

    /// Share of deletions among the mapper's edits (in the diffs) made before `t`, and how many
    /// edits that is.
    #[must_use]
    pub fn prior_deletion_share(&self, uid: i64, t: i64) -> (f64, u64) {
        let Some(m) = self.mappers.get(&uid) else {
            return (0.0, 0);
        };
        let k = m.work.partition_point(|x| x.0 < t);
        let (n, d) = k
            .checked_sub(1)
            .and_then(|i| m.work.get(i))
            .map_or(m.work_before, |&(_, n, d)| (n, d));
        #[allow(clippy::cast_precision_loss, reason = "counts are far below 2^52")]
        if n > 0 {
            (d as f64 / n as f64, n)
        } else {
            (0.0, 0)
        }
    }

    /// The mapper's changesets started before `t` that a revert made before `t` named: all of
    /// them, and those whose revert cited vandalism.
    #[must_use]
    pub fn prior_reverted(&self, uid: i64, t: i64) -> (u64, u64) {
        let Some(m) = self.mappers.get(&uid) else {
            return (0, 0);
        };
        let before = m.reverted.iter().filter(|(c, _)| *c < t);
        let (mut any, mut vandalism) = (0, 0);
        for (_, r) in before {
            any += u64::from(r.first < t);
            vandalism += u64::from(r.first_vandalism.is_some_and(|f| f < t));
        }
        (any, vandalism)
    }

    /// Time of the mapper's first changeset seen, if any.
    #[must_use]
    pub fn first_seen(&self, uid: i64) -> Option<i64> {
        self.mappers.get(&uid).and_then(|m| m.first_seen)
    }

    /// Number of the mapper's changesets started before `t`.
    #[must_use]
    pub fn prior(&self, uid: i64, t: i64) -> usize {
        self.mappers.get(&uid).map_or(0, |m| {
            m.created_before + m.created.partition_point(|&c| c < t)
        })
    }

    /// Distinct ISO weeks with a changeset before `t`.
    #[must_use]
    pub fn active_weeks(&self, uid: i64, t: i64) -> usize {
        let Some(m) = self.mappers.get(&uid) else {
            return 0;
        };
        let k = m.created.partition_point(|&c| c < t);
        k.checked_sub(1)
            .and_then(|i| m.weeks_upto.get(i))
            .map_or(m.weeks_before, |&n| n) as usize
    }
}

/// Account age in days at time `t` (0 when the first changeset seen is this one or later).
#[must_use]
pub fn account_age_days(hist: &MapperHistory, uid: i64, first_edit: i64, t: i64) -> f64 {
    let first = hist
        .first_seen(uid)
        .map_or(first_edit, |f| f.min(first_edit));
    #[allow(
        clippy::cast_precision_loss,
        reason = "seconds fit f64 exactly for any real date"
    )]
    let days = (t - first).max(0) as f64 / 86_400.0;
    days
}

/// The value of the `name` tag of packed tags, if any, and how many tags they hold: one scan
/// instead of a [`packed_tag`] lookup and an [`unpack_tags`] count.
fn name_and_count(tags: &str) -> (Option<&str>, usize) {
    let mut name = None;
    let mut n = 0;
    for (k, v) in unpack_tags(tags) {
        if name.is_none() && k == "name" {
            name = Some(v);
        }
        n += 1;
    }
    (name, n)
}

/// Computes the facts of each edit.
#[must_use]
pub fn edit_facts<S: BuildHasher>(
    edits: &[Edit],
    hist: &MapperHistory,
    first_edit_by_uid: &HashMap<i64, i64, S>,
    land: &Land,
    existing: &ExistingData,
    cfg: &FeatureConfig,
) -> Vec<EditFacts> {
    let mut cs_start: foldhash::HashMap<i64, i64> = foldhash::HashMap::default();
    for e in edits {
        let t = cs_start.entry(e.changeset).or_insert(e.ts);
        *t = (*t).min(e.ts);
    }
    let mut land_lookup = crate::land::LandLookup::new(land);
    edits
        .iter()
        .map(|e| {
            let first = first_edit_by_uid.get(&e.uid).copied().unwrap_or(e.ts);
            let age = account_age_days(hist, e.uid, first, e.ts);
            let mut f = EditFacts {
                newcomer: age < cfg.newcomer_days,
                ..EditFacts::default()
            };
            let (new_name, new_count) = name_and_count(&e.tags);
            let (old_name, old_count) = e.prev_tags.as_deref().map_or((None, 0), name_and_count);
            if e.op != Op::Delete {
                if let (Some(n), Some(o)) = (new_name, old_name) {
                    f.name_changed = n != o;
                }
                f.spam_name = new_name.is_some_and(|n| is_spam_like(n) && old_name != Some(n));
                f.spam_rename = f.spam_name && e.op == Op::Modify;
            }
            if e.op == Op::Modify && e.prev_tags.is_some() {
                f.tags_stripped = old_count >= new_count + 3;
            }
            if e.op == Op::Delete {
                f.deleted_feature = e.etype != ElementType::Node
                    || e.prev_tags.as_deref().is_none_or(|t| !t.is_empty());
                f.deleted_mature = e.prev_version.unwrap_or(e.version - 1) >= 5;
                #[allow(clippy::cast_precision_loss, reason = "seconds fit f64 exactly")]
                {
                    f.deleted_old = e
                        .prev_ts
                        .is_some_and(|p| (e.ts - p) as f64 / 86_400.0 >= cfg.old_object_days);
                }
            }
            if e.op == Op::Modify && e.etype == ElementType::Node {
                if let (Some(a), Some(b)) = (e.pos, e.prev_pos) {
                    f.large_move = a.distance_m(b) >= cfg.large_move_m;
                }
            }
            let tagged = !e.tags.is_empty();
            let judged = e.etype != ElementType::Relation || tagged;
            // Whether a tagged creation is judged at all (read once: a scan of its tags).
            let suspect = e.op == Op::Create && tagged && judged && !is_maritime(&e.tags);
            if e.op == Op::Create && !land.is_empty() {
                if let Some(d) = e.pos.and_then(|p| land_lookup.distance_to_land_m(p)) {
                    f.water_create = d > 0.0;
                    if d >= cfg.offshore_min_m && suspect {
                        f.offshore_create = true;
                        f.offshore_m = d;
                    }
                }
            }
            if suspect {
                let start = cs_start.get(&e.changeset).copied().unwrap_or(e.ts);
                f.far_create = e.pos.is_some_and(|p| existing.is_far(p, start));
            }
            f
        })
        .collect()
}

/// All evidence about one changeset.
#[derive(Debug, Clone, Default)]
pub struct ChangesetFeatures {
    pub id: i64,
    pub uid: i64,
    pub user: String,
    pub created_at: i64,
    pub comment: String,
    pub editor: String,
    // Metadata.
    pub edits: u64,
    pub creates: u64,
    pub modifies: u64,
    pub deletes: u64,
    /// [op][element type] counts.
    pub by_type: [[u64; 3]; 3],
    pub deletion_share: f64,
    pub bbox_diag_km: f64,
    pub duration_min: f64,
    /// Characters in the comment (trimmed).
    pub comment_chars: u64,
    // Mapper.
    pub account_age_days: f64,
    pub history_known: bool,
    pub prior_changesets: u64,
    pub active_weeks: u64,
    /// Share of deletions among the mapper's earlier edits in the diffs.
    pub prior_deletion_share: f64,
    /// Earlier edits of the mapper in the diffs.
    pub prior_edits: u64,
    /// The mapper's earlier changesets already reverted when this one began.
    pub prior_reverted: u64,
    /// Of those, reverted with vandalism cited.
    pub prior_vandalism_reverted: u64,
    // Edits.
    pub names_changed: u64,
    pub spam_names: u64,
    /// Most objects given one and the same new name.
    pub repeated_name_max: u64,
    pub tags_stripped: u64,
    pub deleted_mature: u64,
    /// Deleted objects unchanged for a year or more.
    pub deleted_old: u64,
    /// Nodes moved 100 m or more.
    pub large_moves: u64,
    pub offshore_creates: u64,
    pub offshore_max_m: f64,
    /// Tagged objects created about 1.5 km or more from any earlier data.
    pub far_creates: u64,
}

/// Builds each changeset's features from its edits (and metadata where present).
#[must_use]
pub fn changeset_features<S: BuildHasher>(
    edits: &[Edit],
    facts: &[EditFacts],
    metas: &HashMap<i64, ChangesetMeta>,
    hist: &MapperHistory,
    first_edit_by_uid: &HashMap<i64, i64, S>,
) -> Vec<ChangesetFeatures> {
    // Per changeset: its features so far, first and last edit time, and new names given. The
    // map holds positions in `partial` only, so growing it moves small entries, not features.
    type Partial<'a> = (ChangesetFeatures, i64, i64, foldhash::HashMap<&'a str, u64>);
    let mut partial: Vec<Partial<'_>> = Vec::new();
    let mut by_cs: foldhash::HashMap<i64, usize> = foldhash::HashMap::default();
    for (e, f) in edits.iter().zip(facts) {
        let k = *by_cs.entry(e.changeset).or_insert_with(|| {
            partial.push((
                ChangesetFeatures {
                    id: e.changeset,
                    uid: e.uid,
                    user: e.user.to_string(),
                    ..ChangesetFeatures::default()
                },
                i64::MAX,
                i64::MIN,
                foldhash::HashMap::default(),
            ));
            partial.len() - 1
        });
        let (c, t0, t1, names) = &mut partial[k];
        if e.ts < *t0 {
            // The mapper of the changeset's first edit, whatever order the edits come in.
            if c.uid != e.uid {
                c.uid = e.uid;
                c.user = e.user.to_string();
            }
            *t0 = e.ts;
        }
        *t1 = (*t1).max(e.ts);
        c.edits += 1;
        match e.op {
            Op::Create => c.creates += 1,
            Op::Modify => c.modifies += 1,
            Op::Delete => c.deletes += 1,
        }
        #[allow(
            clippy::cast_possible_truncation,
            clippy::cast_sign_loss,
            reason = "codes are 0..=2"
        )]
        {
            c.by_type[e.op.code() as usize][e.etype.code() as usize] += 1;
        }
        c.names_changed += u64::from(f.name_changed);
        c.spam_names += u64::from(f.spam_name);
        c.tags_stripped += u64::from(f.tags_stripped);
        c.deleted_mature += u64::from(f.deleted_mature);
        c.deleted_old += u64::from(f.deleted_old);
        c.large_moves += u64::from(f.large_move);
        c.far_creates += u64::from(f.far_create);
        if f.offshore_create {
            c.offshore_creates += 1;
            c.offshore_max_m = c.offshore_max_m.max(f.offshore_m);
        }
        if e.op != Op::Delete && (f.name_changed || e.op == Op::Create) {
            if let Some(n) = packed_tag(&e.tags, "name") {
                *names.entry(n).or_default() += 1;
            }
        }
    }
    let mut out: Vec<ChangesetFeatures> = partial
        .into_iter()
        .map(|(mut c, t0, t1, names)| {
            c.repeated_name_max = names.values().copied().max().unwrap_or(0);
            #[allow(clippy::cast_precision_loss, reason = "counts are far below 2^52")]
            {
                c.deletion_share = c.deletes as f64 / c.edits.max(1) as f64;
                c.duration_min = (t1 - t0).max(0) as f64 / 60.0;
            }
            let meta = metas.get(&c.id);
            c.created_at = meta.map_or(t0, |m| m.created_at.min(t0));
            if let Some(m) = meta {
                c.comment.clone_from(&m.comment);
                c.editor.clone_from(&m.editor);
                if let Some((lo, hi)) = m.bbox {
                    c.bbox_diag_km = lo.distance_m(hi) / 1000.0;
                }
                if !m.user.is_empty() {
                    c.user.clone_from(&m.user);
                }
            }
            let first = first_edit_by_uid.get(&c.uid).copied().unwrap_or(t0);
            c.account_age_days = account_age_days(hist, c.uid, first, c.created_at);
            c.history_known = hist.first_seen(c.uid).is_some();
            c.prior_changesets = hist.prior(c.uid, c.created_at) as u64;
            c.active_weeks = hist.active_weeks(c.uid, c.created_at) as u64;
            (c.prior_deletion_share, c.prior_edits) =
                hist.prior_deletion_share(c.uid, c.created_at);
            (c.prior_reverted, c.prior_vandalism_reverted) =
                hist.prior_reverted(c.uid, c.created_at);
            c.comment_chars = c.comment.trim().chars().count() as u64;
            c
        })
        .collect();
    out.sort_by_key(|c| c.id);
    out
}

/// One entry of the numeric feature vector that fitted models read.
pub struct Feature {
    /// Stable name, stored in model files.
    pub name: &'static str,
    /// What it measures (the features table in `docs/features.md` repeats these).
    pub meaning: &'static str,
    value: fn(&ChangesetFeatures) -> f64,
    words: fn(&ChangesetFeatures) -> String,
}

impl Feature {
    /// The feature's value for a changeset.
    #[must_use]
    pub fn value(&self, c: &ChangesetFeatures) -> f64 {
        (self.value)(c)
    }

    /// The changeset's value in plain words ("account 2 days old"), for reasons.
    #[must_use]
    pub fn words(&self, c: &ChangesetFeatures) -> String {
        (self.words)(c)
    }
}

#[allow(clippy::cast_precision_loss, reason = "counts are far below 2^52")]
fn ln1(n: u64) -> f64 {
    (n as f64).ln_1p()
}

#[allow(clippy::cast_precision_loss, reason = "counts are far below 2^52")]
fn share(part: u64, whole: u64) -> f64 {
    if whole == 0 {
        0.0
    } else {
        part as f64 / whole as f64
    }
}

fn plural(n: u64, one: &str, many: &str) -> String {
    format!("{n} {}", if n == 1 { one } else { many })
}

fn type_edits(c: &ChangesetFeatures, t: usize) -> u64 {
    c.by_type.iter().map(|op| op[t]).sum()
}

/// The feature vector, in model-file order. Counts enter as `ln(1 + n)` so a changeset of 400
/// deletions is not 400 times one of a single deletion; shares and indicators as they are.
pub const FEATURES: &[Feature] = &[
    Feature {
        name: "edits_log",
        meaning: "ln(1 + edits in the changeset)",
        value: |c| ln1(c.edits),
        words: |c| plural(c.edits, "edit", "edits"),
    },
    Feature {
        name: "creates_log",
        meaning: "ln(1 + objects created)",
        value: |c| ln1(c.creates),
        words: |c| format!("created {}", plural(c.creates, "object", "objects")),
    },
    Feature {
        name: "modifies_log",
        meaning: "ln(1 + objects modified)",
        value: |c| ln1(c.modifies),
        words: |c| format!("modified {}", plural(c.modifies, "object", "objects")),
    },
    Feature {
        name: "deletes_log",
        meaning: "ln(1 + objects deleted)",
        value: |c| ln1(c.deletes),
        words: |c| format!("deleted {}", plural(c.deletes, "object", "objects")),
    },
    Feature {
        name: "deletion_share",
        meaning: "deletions / edits",
        value: |c| c.deletion_share,
        words: |c| {
            format!(
                "{:.0}% of its edits are deletions",
                c.deletion_share * 100.0
            )
        },
    },
    Feature {
        name: "way_share",
        meaning: "edits of ways / edits",
        value: |c| share(type_edits(c, 1), c.edits),
        words: |c| {
            format!(
                "{:.0}% of its edits are ways",
                share(type_edits(c, 1), c.edits) * 100.0
            )
        },
    },
    Feature {
        name: "relation_share",
        meaning: "edits of relations / edits",
        value: |c| share(type_edits(c, 2), c.edits),
        words: |c| {
            format!(
                "{:.0}% of its edits are relations",
                share(type_edits(c, 2), c.edits) * 100.0
            )
        },
    },
    Feature {
        name: "bbox_m_per_edit_log",
        meaning: "ln(1 + bounding-box diagonal in metres / edits): a wide box for little work",
        value: |c| (c.bbox_diag_km * 1000.0 / c.edits.max(1) as f64).ln_1p(),
        words: |c| {
            format!(
                "a {:.1} km wide area for {}",
                c.bbox_diag_km,
                plural(c.edits, "edit", "edits")
            )
        },
    },
    Feature {
        name: "no_comment",
        meaning: "1 when the changeset has no comment",
        value: |c| f64::from(u8::from(c.comment.trim().is_empty())),
        words: |c| {
            if c.comment.trim().is_empty() {
                "no changeset comment".to_owned()
            } else {
                "has a changeset comment".to_owned()
            }
        },
    },
    Feature {
        name: "comment_chars_log",
        meaning: "ln(1 + characters in the comment)",
        value: |c| ln1(c.comment_chars),
        words: |c| {
            if c.comment_chars == 0 {
                "no changeset comment".to_owned()
            } else {
                format!(
                    "a comment of {}",
                    plural(c.comment_chars, "character", "characters")
                )
            }
        },
    },
    Feature {
        name: "editor_missing",
        meaning: "1 when the changeset names no editor (created_by)",
        value: |c| f64::from(u8::from(c.editor.trim().is_empty())),
        words: |c| {
            if c.editor.trim().is_empty() {
                "names no editor software".to_owned()
            } else {
                format!("made with {}", c.editor.trim())
            }
        },
    },
    Feature {
        name: "duration_log",
        meaning: "ln(1 + minutes from first to last edit)",
        value: |c| c.duration_min.max(0.0).ln_1p(),
        words: |c| format!("edits spread over {:.0} minutes", c.duration_min),
    },
    Feature {
        name: "account_age_log",
        meaning: "ln(1 + account age in days): days since the mapper's first changeset seen",
        value: |c| c.account_age_days.max(0.0).ln_1p(),
        words: |c| format!("account {} days old", c.account_age_days.floor()),
    },
    Feature {
        name: "account_under_1d",
        meaning: "1 when the account is less than a day old",
        value: |c| f64::from(u8::from(c.account_age_days < 1.0)),
        words: |c| format!("account {} days old", c.account_age_days.floor()),
    },
    Feature {
        name: "account_under_7d",
        meaning: "1 when the account is less than 7 days old",
        value: |c| f64::from(u8::from(c.account_age_days < 7.0)),
        words: |c| format!("account {} days old", c.account_age_days.floor()),
    },
    Feature {
        name: "account_under_30d",
        meaning: "1 when the account is less than 30 days old",
        value: |c| f64::from(u8::from(c.account_age_days < 30.0)),
        words: |c| format!("account {} days old", c.account_age_days.floor()),
    },
    Feature {
        name: "prior_changesets_log",
        meaning: "ln(1 + the mapper's earlier changesets)",
        value: |c| ln1(c.prior_changesets),
        words: |c| {
            plural(
                c.prior_changesets,
                "earlier changeset",
                "earlier changesets",
            )
        },
    },
    Feature {
        name: "active_weeks_log",
        meaning: "ln(1 + distinct weeks with an earlier changeset)",
        value: |c| ln1(c.active_weeks),
        words: |c| {
            format!(
                "active in {} before",
                plural(c.active_weeks, "week", "weeks")
            )
        },
    },
    Feature {
        name: "prior_deletion_share",
        meaning: "deletions / edits in the mapper's earlier work (in the diffs read)",
        value: |c| c.prior_deletion_share,
        words: |c| {
            format!(
                "{:.0}% of {} earlier edits were deletions",
                c.prior_deletion_share * 100.0,
                c.prior_edits
            )
        },
    },
    Feature {
        name: "prior_reverted_share",
        meaning: "earlier changesets already reverted / earlier changesets",
        value: |c| share(c.prior_reverted, c.prior_changesets),
        words: |c| {
            format!(
                "{} of {} earlier changesets were reverted",
                c.prior_reverted, c.prior_changesets
            )
        },
    },
    Feature {
        name: "prior_vandalism_reverted_log",
        meaning: "ln(1 + earlier changesets reverted with vandalism cited)",
        value: |c| ln1(c.prior_vandalism_reverted),
        words: |c| {
            format!(
                "{} reverted as vandalism before",
                plural(
                    c.prior_vandalism_reverted,
                    "earlier changeset",
                    "earlier changesets"
                )
            )
        },
    },
    Feature {
        name: "names_changed_log",
        meaning: "ln(1 + names changed)",
        value: |c| ln1(c.names_changed),
        words: |c| format!("changed {}", plural(c.names_changed, "name", "names")),
    },
    Feature {
        name: "spam_names_log",
        meaning: "ln(1 + new names with a web address or phone number)",
        value: |c| ln1(c.spam_names),
        words: |c| {
            format!(
                "{} with a web address or phone number",
                plural(c.spam_names, "name", "names")
            )
        },
    },
    Feature {
        name: "repeated_name_log",
        meaning: "ln(most objects given one and the same new name), 0 when no name repeats",
        value: |c| ln1(c.repeated_name_max.saturating_sub(1)),
        words: |c| {
            format!(
                "the same name given to {}",
                plural(c.repeated_name_max, "object", "objects")
            )
        },
    },
    Feature {
        name: "tags_stripped_log",
        meaning: "ln(1 + objects losing 3 or more tags)",
        value: |c| ln1(c.tags_stripped),
        words: |c| {
            format!(
                "removed most tags from {}",
                plural(c.tags_stripped, "object", "objects")
            )
        },
    },
    Feature {
        name: "deleted_mature_log",
        meaning: "ln(1 + deleted objects that had 5 or more versions)",
        value: |c| ln1(c.deleted_mature),
        words: |c| {
            format!(
                "deleted {} with 5 or more versions",
                plural(c.deleted_mature, "object", "objects")
            )
        },
    },
    Feature {
        name: "deleted_old_log",
        meaning: "ln(1 + deleted objects unchanged for a year or more)",
        value: |c| ln1(c.deleted_old),
        words: |c| {
            format!(
                "deleted {} unchanged for a year or more",
                plural(c.deleted_old, "object", "objects")
            )
        },
    },
    Feature {
        name: "large_moves_log",
        meaning: "ln(1 + nodes moved 100 m or more)",
        value: |c| ln1(c.large_moves),
        words: |c| {
            format!(
                "moved {} 100 m or more",
                plural(c.large_moves, "node", "nodes")
            )
        },
    },
    Feature {
        name: "offshore_creates_log",
        meaning: "ln(1 + non-maritime objects created in the sea, 500 m or more from land)",
        value: |c| ln1(c.offshore_creates),
        words: |c| {
            format!(
                "created {} in the sea",
                plural(
                    c.offshore_creates,
                    "non-maritime object",
                    "non-maritime objects"
                )
            )
        },
    },
    Feature {
        name: "far_creates_log",
        meaning: "ln(1 + tagged objects created about 1.5 km or more from any earlier data)",
        value: |c| ln1(c.far_creates),
        words: |c| {
            format!(
                "created {} far from any earlier data",
                plural(c.far_creates, "object", "objects")
            )
        },
    },
];

impl ChangesetFeatures {
    /// The values of [`FEATURES`], in order.
    #[must_use]
    pub fn vector(&self) -> Vec<f64> {
        FEATURES.iter().map(|f| f.value(self)).collect()
    }
}

/// Everything the features of a time window need from the database besides its edits: the
/// revert index, the existing-data grid and the land layer. Loaded once, used for many windows.
pub struct FeatureContext<'a> {
    pub store: &'a Store,
    pub land: &'a Land,
    pub reverts: RevertIndex,
    pub existing: ExistingData,
    pub cfg: FeatureConfig,
}

impl<'a> FeatureContext<'a> {
    /// Loads the revert index and the existing-data grid.
    ///
    /// # Errors
    /// On database failure.
    pub fn load(store: &'a Store, land: &'a Land, cfg: FeatureConfig) -> Result<Self, StoreError> {
        Ok(Self {
            store,
            land,
            reverts: RevertIndex::load(store)?,
            existing: ExistingData::load(store)?,
            cfg,
        })
    }

    /// Edits of `from <= ts < to` with their facts and their changesets' features.
    ///
    /// # Errors
    /// On database failure.
    pub fn window(&self, from: i64, to: i64) -> Result<Window, StoreError> {
        let (edits, metas) = load_edits(self.store, from, to)?;
        let mut first_edit: HashMap<i64, i64> = HashMap::new();
        for e in &edits {
            first_edit
                .entry(e.uid)
                .and_modify(|t| *t = (*t).min(e.ts))
                .or_insert(e.ts);
        }
        let mut uids: Vec<i64> = first_edit.keys().copied().collect();
        uids.sort_unstable();
        let hist = MapperHistory::load(self.store, uids, &self.reverts)?;
        let facts = edit_facts(
            &edits,
            &hist,
            &first_edit,
            self.land,
            &self.existing,
            &self.cfg,
        );
        let features = changeset_features(&edits, &facts, &metas, &hist, &first_edit);
        Ok(Window {
            edits,
            facts,
            features,
        })
    }

    /// Features of the given changesets (those with edits in the database), computed a week at
    /// a time so memory follows a week's edits, not the whole history. Each changeset's features
    /// come from the window holding its whole day of editing.
    ///
    /// # Errors
    /// On database failure.
    pub fn for_changesets(
        &self,
        ids: &std::collections::BTreeSet<i64>,
        progress: &Progress,
    ) -> Result<Vec<ChangesetFeatures>, StoreError> {
        let mut starts: Vec<(i64, i64)> = self
            .store
            .edited_changesets()?
            .into_iter()
            .filter(|(id, _)| ids.contains(id))
            .map(|(id, t)| (t, id))
            .collect();
        starts.sort_unstable();
        const WEEK: i64 = 604_800;
        const DAY: i64 = 86_400;
        let bar = progress.steps(starts.len() as u64, "features");
        let mut out = Vec::with_capacity(starts.len());
        let mut k = 0;
        while k < starts.len() {
            let from = starts[k].0;
            let end = starts[k..].partition_point(|s| s.0 < from + WEEK) + k;
            let wanted: HashMap<i64, ()> = starts[k..end].iter().map(|s| (s.1, ())).collect();
            let w = self.window(from, from + WEEK + DAY)?;
            out.extend(
                w.features
                    .into_iter()
                    .filter(|f| wanted.contains_key(&f.id)),
            );
            bar.inc((end - k) as u64);
            k = end;
        }
        bar.finish_and_clear();
        out.sort_by_key(|c| c.id);
        Ok(out)
    }
}

/// The edits of a time window, their facts and their changesets' features.
pub struct Window {
    pub edits: Vec<Edit>,
    pub facts: Vec<EditFacts>,
    pub features: Vec<ChangesetFeatures>,
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn distinct_weeks_follow_iso_weeks() {
        use chrono::Datelike;
        // Source: ISO 8601 weeks as chrono computes them (`IsoWeek`): two times share a week
        // when their ISO year and week agree. Times straddle Sunday/Monday midnights, a year
        // end with week 53 (2026-12-31 is in 2026-W53) and times before 1970.
        let mut times: Vec<i64> = vec![-400_000, -1, 0, 345_599, 345_600];
        for d in 0..40i64 {
            let monday_2026_12_21 = 1_797_811_200;
            times.push(monday_2026_12_21 + d * 43_200 - 1);
            times.push(monday_2026_12_21 + d * 43_200);
        }
        times.sort_unstable();
        let mut m = Mapper::new(None);
        for &t in &times {
            m.push_changeset(t, None);
        }
        let got = m.weeks_upto;
        let mut seen = Vec::new();
        for (i, &t) in times.iter().enumerate() {
            let w = chrono::DateTime::from_timestamp(t, 0).unwrap().iso_week();
            if seen.last() != Some(&(w.year(), w.week())) {
                seen.push((w.year(), w.week()));
            }
            assert_eq!(got[i] as usize, seen.len(), "at {t}");
        }
    }

    /// A history read a stretch at a time, forwards with a step back, answers every question
    /// as the whole history does, while holding only part of it.
    #[test]
    fn a_history_read_in_stretches_answers_as_the_whole() {
        use chrono::TimeZone;
        let dir = tempfile::tempdir().unwrap();
        let mut store = Store::open(&dir.path().join("s.db")).unwrap();
        let day = 86_400;
        let t0 = 1_797_811_200; // a Monday
        let iso = |t: i64| {
            chrono::Utc
                .timestamp_opt(t, 0)
                .unwrap()
                .format("%Y-%m-%dT%H:%M:%SZ")
                .to_string()
        };
        // Mapper 1: a changeset every 1.3 days for 60 days; mapper 2: every 5 days, its
        // changeset 2000 reverted for vandalism by changeset 3000 of mapper 1. Each changeset's
        // edits (some deletions) start an hour after it opens.
        let mut changesets = String::new();
        let mut edits = String::new();
        let mut node = 0;
        let mut plan: Vec<(i64, i64, i64)> = (0..46)
            .map(|i| (1000 + i, 1, t0 + i * 112_320))
            .chain((0..12).map(|i| (2000 + i, 2, t0 + 3600 + i * 5 * day)))
            .collect();
        plan.push((3000, 1, t0 + 20 * day + 7));
        for &(id, uid, t) in &plan {
            let comment = if id == 3000 {
                "revert vandalism of changeset 2000"
            } else {
                "mapping"
            };
            changesets.push_str(&format!(
                r#"<changeset id="{id}" created_at="{}" closed_at="{}" open="false" user="m{uid}" uid="{uid}" num_changes="3"><tag k="comment" v="{comment}"/></changeset>"#,
                iso(t),
                iso(t + 7200)
            ));
            for j in 0..(1 + id % 3) {
                node += 1;
                let (ts, op) = (iso(t + 3600 + j), if j == 2 { "delete" } else { "create" });
                edits.push_str(&format!(
                    r#"<{op}><node id="{node}" version="1" changeset="{id}" uid="{uid}" user="m{uid}" timestamp="{ts}" lat="10.0" lon="20.0"/></{op}>"#
                ));
            }
        }
        let files = [
            (
                dir.path().join("c.osm"),
                format!(r#"<osm version="0.6">{changesets}</osm>"#),
            ),
            (
                dir.path().join("d.osc"),
                format!(r#"<osmChange version="0.6">{edits}</osmChange>"#),
            ),
        ];
        for (p, text) in &files {
            std::fs::write(p, text).unwrap();
        }
        let paths: Vec<_> = files.iter().map(|f| f.0.clone()).collect();
        crate::ingest::ingest(&mut store, &paths, &Progress::silent()).unwrap();
        let reverts = RevertIndex::load(&store).unwrap();
        assert!(reverts.reverted(2000).is_some(), "the fixture has a revert");
        let whole = MapperHistory::load(&store, [1, 2, 3], &reverts).unwrap();
        assert_eq!(whole.prior(1, t0 + 61 * day), 47);
        assert!(whole.prior_deletion_share(2, t0 + 61 * day).1 > 0);
        let mut part = MapperHistory::default();
        // Parts of 2 days, the seventh asking from 12 days back (read again from the start).
        for k in 0..30 {
            let (from, to) = (t0 + k * 2 * day, t0 + (k + 1) * 2 * day);
            let since = if k == 7 { from - 12 * day } else { from };
            part.prepare(
                &store,
                &reverts,
                [(1, since), (2, since), (3, since)],
                to,
                3 * day,
            )
            .unwrap();
            for t in (since..to).step_by(7919) {
                for uid in [1, 2, 3] {
                    assert_eq!(part.first_seen(uid), whole.first_seen(uid));
                    assert_eq!(part.prior(uid, t), whole.prior(uid, t), "{uid} at {t}");
                    assert_eq!(part.active_weeks(uid, t), whole.active_weeks(uid, t));
                    assert_eq!(
                        part.prior_deletion_share(uid, t),
                        whole.prior_deletion_share(uid, t)
                    );
                    assert_eq!(part.prior_reverted(uid, t), whole.prior_reverted(uid, t));
                }
            }
            let held = part.mappers[&1].created.len();
            assert!(
                k == 7 || held <= 8,
                "part {k} holds {held} changesets of mapper 1"
            );
        }
        assert_eq!(
            part.reloads(),
            3,
            "each mapper asked about is read again once"
        );
        assert_eq!(whole.prior_reverted(2, t0 + 61 * day), (1, 1));
    }

    #[test]
    fn spam_like_names() {
        // Common practice, no source: adverts carry web addresses or phone numbers.
        for s in [
            "Best prices www.quickdeal.example",
            "Call +12 345 678 901",
            "shop http://x.y",
            "cheapdeals.shop",
            "Visit loans.example!",
        ] {
            assert!(is_spam_like(s), "{s}");
        }
        for s in [
            "Harbour Bakery",
            "St. Mary's",
            "Route 66",
            "Unit 12-14",
            "Café No. 5",
            "A.B. Smith",
        ] {
            assert!(!is_spam_like(s), "{s}");
        }
    }

    #[test]
    fn feature_names_are_unique_and_the_vector_follows_them() {
        let mut names: Vec<&str> = FEATURES.iter().map(|f| f.name).collect();
        let c = ChangesetFeatures {
            edits: 9,
            deletes: 4,
            deletion_share: 4.0 / 9.0,
            ..ChangesetFeatures::default()
        };
        let v = c.vector();
        assert_eq!(v.len(), names.len());
        let at = |n: &str| v[names.iter().position(|x| *x == n).unwrap()];
        assert!((at("deletes_log") - 5f64.ln()).abs() < 1e-12);
        assert_eq!(at("no_comment"), 1.0);
        names.sort_unstable();
        names.dedup();
        assert_eq!(names.len(), FEATURES.len());
    }

    #[test]
    fn the_features_table_names_every_feature() {
        let doc = include_str!("../docs/features.md");
        for f in FEATURES {
            assert!(
                doc.contains(&format!("| `{}` | {} |", f.name, f.meaning)),
                "{}",
                f.name
            );
        }
    }

    #[test]
    fn far_from_data_means_no_earlier_node_within_a_grid_square() {
        let p = crate::model::Coord::from_degrees(45.2, -33.6).unwrap();
        let g = crate::store::grid_square(p.lat_e7(), p.lon_e7());
        let mut d = ExistingData::default();
        assert!(!d.is_far(p, 1000), "no data loaded: never far");
        d.first.insert(g + 5 * 65_536, i64::MIN);
        assert!(d.is_far(p, 1000));
        d.first.insert(g + 65_536 - 1, 2000);
        assert!(d.is_far(p, 1000), "created later than the changeset");
        assert!(!d.is_far(p, 3000));
    }

    #[test]
    fn maritime_tags() {
        let t = |kv: &[(&str, &str)]| {
            crate::store::pack_tags(
                &kv.iter()
                    .map(|(k, v)| ((*k).to_owned(), (*v).to_owned()))
                    .collect::<Vec<_>>(),
            )
        };
        assert!(is_maritime(&t(&[("seamark:type", "buoy_lateral")])));
        assert!(is_maritime(&t(&[("place", "islet"), ("name", "X")])));
        assert!(!is_maritime(&t(&[("building", "yes")])));
        assert!(!is_maritime(&t(&[("place", "village")])));
    }
}
