//! Evidence about each changeset, in three families (the field's published practice):
//! its metadata, its mapper's history at the time, and its individual edits.
//!
//! Per-edit facts ([`EditFacts`]) are computed once here and reused by the cell aggregates, so a
//! "spam-like rename" means the same thing in a changeset's reasons and in a cell's count.

use std::collections::HashMap;

use rusqlite::params;

use crate::land::Land;
use crate::locate::{ChangesetMeta, Edit};
use crate::model::{ElementType, Op};
use crate::store::{packed_tag, unpack_tags, Store, StoreError};

/// Tunables of the evidence.
#[derive(Debug, Clone, Copy)]
pub struct FeatureConfig {
    /// An account younger than this many days at the edit is a newcomer.
    pub newcomer_days: f64,
    /// A non-maritime object created in water this far from land (metres) counts as offshore.
    pub offshore_min_m: f64,
}

impl Default for FeatureConfig {
    fn default() -> Self {
        Self {
            newcomer_days: 30.0,
            offshore_min_m: 500.0,
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
}

/// The mappers' histories, from changeset metadata: each mapper's changeset start times, sorted.
#[derive(Debug, Default)]
pub struct MapperHistory {
    created: HashMap<i64, Vec<i64>>,
}

impl MapperHistory {
    /// Loads the history of the given mappers.
    ///
    /// # Errors
    /// On database failure.
    pub fn load(store: &Store, uids: impl IntoIterator<Item = i64>) -> Result<Self, StoreError> {
        let mut st = store
            .conn()
            .prepare_cached("SELECT created_at FROM changesets WHERE uid = ?1 ORDER BY created_at")
            .map_err(|e| store.map_err(e))?;
        let mut created = HashMap::new();
        for uid in uids {
            let v = st
                .query_map(params![uid], |r| r.get::<_, i64>(0))
                .map_err(|e| store.map_err(e))?
                .collect::<Result<Vec<_>, _>>()
                .map_err(|e| store.map_err(e))?;
            created.insert(uid, v);
        }
        Ok(Self { created })
    }

    /// Time of the mapper's first changeset seen, if any.
    #[must_use]
    pub fn first_seen(&self, uid: i64) -> Option<i64> {
        self.created.get(&uid).and_then(|v| v.first().copied())
    }

    /// Number of the mapper's changesets started before `t`.
    #[must_use]
    pub fn prior(&self, uid: i64, t: i64) -> usize {
        self.created
            .get(&uid)
            .map_or(0, |v| v.partition_point(|&c| c < t))
    }

    /// Distinct ISO weeks with a changeset before `t`.
    #[must_use]
    pub fn active_weeks(&self, uid: i64, t: i64) -> usize {
        let Some(v) = self.created.get(&uid) else {
            return 0;
        };
        let mut weeks: Vec<i64> = v
            .iter()
            .take_while(|&&c| c < t)
            .map(|c| (c - 345_600).div_euclid(604_800))
            .collect();
        weeks.dedup();
        weeks.len()
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

/// Computes the facts of each edit.
#[must_use]
pub fn edit_facts(
    edits: &[Edit],
    hist: &MapperHistory,
    first_edit_by_uid: &HashMap<i64, i64>,
    land: &Land,
    cfg: &FeatureConfig,
) -> Vec<EditFacts> {
    edits
        .iter()
        .map(|e| {
            let first = first_edit_by_uid.get(&e.uid).copied().unwrap_or(e.ts);
            let age = account_age_days(hist, e.uid, first, e.ts);
            let mut f = EditFacts {
                newcomer: age < cfg.newcomer_days,
                ..EditFacts::default()
            };
            let new_name = packed_tag(&e.tags, "name");
            let old_name = e.prev_tags.as_deref().and_then(|t| packed_tag(t, "name"));
            if e.op != Op::Delete {
                if let (Some(n), Some(o)) = (new_name, old_name) {
                    f.name_changed = n != o;
                }
                f.spam_name = new_name.is_some_and(|n| is_spam_like(n) && old_name != Some(n));
                f.spam_rename = f.spam_name && e.op == Op::Modify;
            }
            if e.op == Op::Modify {
                if let Some(prev) = &e.prev_tags {
                    f.tags_stripped = unpack_tags(prev).count() >= unpack_tags(&e.tags).count() + 3;
                }
            }
            if e.op == Op::Delete {
                f.deleted_feature = e.etype != ElementType::Node
                    || e.prev_tags.as_deref().is_none_or(|t| !t.is_empty());
                f.deleted_mature = e.prev_version.unwrap_or(e.version - 1) >= 5;
            }
            let tagged = !e.tags.is_empty();
            let judged = e.etype != ElementType::Relation || tagged;
            if e.op == Op::Create && !land.is_empty() {
                if let Some(d) = e.pos.and_then(|p| land.distance_to_land_m(p)) {
                    f.water_create = d > 0.0;
                    if d >= cfg.offshore_min_m && tagged && judged && !is_maritime(&e.tags) {
                        f.offshore_create = true;
                        f.offshore_m = d;
                    }
                }
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
    // Mapper.
    pub account_age_days: f64,
    pub history_known: bool,
    pub prior_changesets: u64,
    pub active_weeks: u64,
    // Edits.
    pub names_changed: u64,
    pub spam_names: u64,
    /// Most objects given one and the same new name.
    pub repeated_name_max: u64,
    pub tags_stripped: u64,
    pub deleted_mature: u64,
    pub offshore_creates: u64,
    pub offshore_max_m: f64,
}

/// Builds each changeset's features from its edits (and metadata where present).
#[must_use]
pub fn changeset_features(
    edits: &[Edit],
    facts: &[EditFacts],
    metas: &HashMap<i64, ChangesetMeta>,
    hist: &MapperHistory,
    first_edit_by_uid: &HashMap<i64, i64>,
) -> Vec<ChangesetFeatures> {
    let mut by_cs: HashMap<i64, (ChangesetFeatures, i64, i64, HashMap<&str, u64>)> = HashMap::new();
    for (e, f) in edits.iter().zip(facts) {
        let entry = by_cs.entry(e.changeset).or_insert_with(|| {
            (
                ChangesetFeatures {
                    id: e.changeset,
                    uid: e.uid,
                    user: e.user.clone(),
                    ..ChangesetFeatures::default()
                },
                i64::MAX,
                i64::MIN,
                HashMap::new(),
            )
        });
        let (c, t0, t1, names) = entry;
        *t0 = (*t0).min(e.ts);
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
    let mut out: Vec<ChangesetFeatures> = by_cs
        .into_values()
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
            c
        })
        .collect();
    out.sort_by_key(|c| c.id);
    out
}

#[cfg(test)]
mod tests {
    use super::*;

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
