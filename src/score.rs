//! The default scorecard: log-odds points per piece of evidence, summed with a base rate and
//! passed through the logistic function to give a score in [0, 1], with the reasons that moved
//! it most, in plain words.
//!
//! | evidence | points | why |
//! |---|---|---|
//! | base | -4.0 | most changesets are fine; about 2% prior odds |
//! | account younger than 1 / 7 / 30 days | +1.6 / +1.2 / +0.7 | vandalism comes disproportionately from new accounts |
//! | long-standing mapper (over a year, 50+ changesets) | -1.0 | history is the strongest signal |
//! | deletions: `1.8 ln(d / 10)` capped at 4.5, times the deletion share, from 20 deletions | up to +4.5 | mass deletion is the commonest damage |
//! | names that look like adverts (web address, phone number) | +2.0 + 0.5 ln n | spam |
//! | the same new name on 5+ objects | +0.8 | copy-paste spam or nonsense |
//! | 5+ names changed | +0.6 | renaming waves |
//! | 3+ objects losing 3+ tags | +0.8 | tag stripping |
//! | 3+ deletions of objects with 5+ versions | +0.5 | long-curated objects removed |
//! | 3+ non-maritime objects created in water | +2.5 + 0.5 ln(n / 3) | fabricated places |
//! | 3+ tagged objects created far (about 1.5 km or more) from any earlier data | +0.8 | fabrication on land, or mapping in the wrong place |
//! | 5+ deleted objects unchanged for a year or more | +0.4 | long-settled data removed |
//! | 3+ nodes moved 100 m or more | +0.6 | dragged geometry, deliberate or accidental |
//! | earlier work reverted as vandalism (before this changeset) | +1.5 | repeat vandalism is common |
//! | 2+ earlier changesets reverted, a third or more of them | +0.5 | a pattern of reverted work, whatever the reason |
//! | no comment | +0.4 | weak, but adds up |
//! | a comment of 15+ characters | -0.3 | explains the work |
//!
//! Weights are set by hand from the reasoning above (common practice for scorecards, no source).
//! [`Scoring`] chooses between this scorecard, a fitted logistic model (`crate::fit::Model`,
//! whose reasons are its largest weight × feature contributions) and scores imported from
//! elsewhere.

use std::collections::BTreeMap;

use crate::features::ChangesetFeatures;
use crate::fit::Model;

/// A changeset's score and its reasons.
#[derive(Debug, Clone, PartialEq)]
pub struct Scored {
    pub score: f64,
    /// (points, words), largest absolute points first.
    pub reasons: Vec<(f64, String)>,
}

/// Points below this size are not worth telling a reviewer.
const REASON_MIN_POINTS: f64 = 0.25;

/// Logistic function.
#[must_use]
pub fn logistic(x: f64) -> f64 {
    1.0 / (1.0 + (-x).exp())
}

#[allow(clippy::cast_precision_loss, reason = "counts are small")]
fn f(n: u64) -> f64 {
    n as f64
}

/// Scores one changeset with the default scorecard.
#[must_use]
pub fn score(c: &ChangesetFeatures) -> Scored {
    let mut total = -4.0;
    let mut reasons: Vec<(f64, String)> = Vec::new();
    let mut add = |p: f64, why: String| {
        total += p;
        reasons.push((p, why));
    };
    let age = c.account_age_days;
    if c.prior_changesets == 0 && age < 1.0 {
        add(1.6, "first changeset of this account".to_owned());
    } else if age < 1.0 {
        add(1.6, "account less than a day old".to_owned());
    } else if age < 7.0 {
        add(1.2, format!("account {} days old", age.floor()));
    } else if age < 30.0 {
        add(0.7, format!("account {} days old", age.floor()));
    } else if age > 365.0 && c.prior_changesets >= 50 {
        add(
            -1.0,
            format!(
                "long-standing mapper ({} earlier changesets)",
                c.prior_changesets
            ),
        );
    }
    if c.deletes >= 20 {
        let p = (1.8 * (f(c.deletes) / 10.0).ln()).clamp(0.0, 4.5) * c.deletion_share;
        add(
            p,
            format!(
                "deleted {} objects, {:.0}% of its edits",
                c.deletes,
                c.deletion_share * 100.0
            ),
        );
    }
    if c.spam_names > 0 {
        add(
            2.0 + 0.5 * f(c.spam_names).ln(),
            format!(
                "{} name{} with a web address or phone number",
                c.spam_names,
                if c.spam_names == 1 { "" } else { "s" }
            ),
        );
    }
    if c.repeated_name_max >= 5 {
        add(
            0.8,
            format!("the same name given to {} objects", c.repeated_name_max),
        );
    }
    if c.names_changed >= 5 {
        add(0.6, format!("changed {} names", c.names_changed));
    }
    if c.tags_stripped >= 3 {
        add(
            0.8,
            format!("removed most tags from {} objects", c.tags_stripped),
        );
    }
    if c.deleted_mature >= 3 {
        add(
            0.5,
            format!(
                "deleted {} objects with 5 or more versions",
                c.deleted_mature
            ),
        );
    }
    if c.offshore_creates >= 3 {
        add(
            2.5 + 0.5 * (f(c.offshore_creates) / 3.0).ln(),
            format!(
                "created {} non-maritime objects in the sea, up to {:.1} km from land",
                c.offshore_creates,
                c.offshore_max_m / 1000.0
            ),
        );
    }
    if c.far_creates >= 3 {
        add(
            0.8,
            format!(
                "created {} objects far from any earlier data",
                c.far_creates
            ),
        );
    }
    if c.deleted_old >= 5 {
        add(
            0.4,
            format!(
                "deleted {} objects unchanged for a year or more",
                c.deleted_old
            ),
        );
    }
    if c.large_moves >= 3 {
        add(0.6, format!("moved {} nodes 100 m or more", c.large_moves));
    }
    if c.prior_vandalism_reverted > 0 {
        add(
            1.5,
            format!(
                "{} earlier changeset{} reverted as vandalism",
                c.prior_vandalism_reverted,
                if c.prior_vandalism_reverted == 1 {
                    ""
                } else {
                    "s"
                }
            ),
        );
    }
    if c.prior_reverted >= 2 && 3 * c.prior_reverted >= c.prior_changesets {
        add(
            0.5,
            format!(
                "{} of {} earlier changesets reverted",
                c.prior_reverted, c.prior_changesets
            ),
        );
    }
    let comment = c.comment.trim();
    if comment.is_empty() {
        add(0.4, "no changeset comment".to_owned());
    } else if comment.chars().count() >= 15 {
        add(-0.3, "explains its work in a comment".to_owned());
    }
    reasons.retain(|(p, _)| p.abs() >= REASON_MIN_POINTS);
    reasons.sort_by(|a, b| b.0.abs().total_cmp(&a.0.abs()));
    Scored {
        score: logistic(total),
        reasons,
    }
}

/// How changesets get their scores.
#[derive(Debug, Clone, Default)]
pub enum Scoring {
    /// The documented default scorecard ([`score`]).
    #[default]
    Scorecard,
    /// A fitted logistic model.
    Model(Model),
    /// Scores computed elsewhere, by changeset id; changesets missing from it get the
    /// scorecard's score, and say so.
    Imported {
        scores: BTreeMap<i64, f64>,
        /// Where they came from (a file name), for the reasons.
        source: String,
    },
}

impl Scoring {
    /// Scores one changeset.
    #[must_use]
    pub fn score(&self, c: &ChangesetFeatures) -> Scored {
        match self {
            Self::Scorecard => score(c),
            Self::Model(m) => m.score(c),
            Self::Imported { scores, source } => {
                let card = score(c);
                let (value, note) = match scores.get(&c.id) {
                    Some(&v) => (v, format!("score imported from {source}")),
                    None => (
                        card.score,
                        format!("not in {source}: scored by the default scorecard"),
                    ),
                };
                let mut reasons = vec![(f64::INFINITY, note)];
                reasons.extend(card.reasons);
                Scored {
                    score: value,
                    reasons,
                }
            }
        }
    }

    /// A short name for reports: `scorecard`, `model` or `imported`.
    #[must_use]
    pub fn name(&self) -> &'static str {
        match self {
            Self::Scorecard => "scorecard",
            Self::Model(_) => "model",
            Self::Imported { .. } => "imported",
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn base() -> ChangesetFeatures {
        ChangesetFeatures {
            edits: 20,
            creates: 15,
            modifies: 5,
            comment: "add buildings along the harbour road".to_owned(),
            account_age_days: 800.0,
            prior_changesets: 300,
            history_known: true,
            ..ChangesetFeatures::default()
        }
    }

    #[test]
    fn ordinary_work_scores_low() {
        let s = score(&base());
        assert!(s.score < 0.02, "{}", s.score);
        assert!(s.reasons.iter().any(|r| r.1.contains("long-standing")));
    }

    #[test]
    fn mass_deletion_scores_high_and_says_why() {
        let c = ChangesetFeatures {
            deletes: 312,
            edits: 318,
            deletion_share: 312.0 / 318.0,
            comment: String::new(),
            account_age_days: 500.0,
            prior_changesets: 4,
            ..base()
        };
        let s = score(&c);
        assert!(s.score > 0.6, "{}", s.score);
        assert_eq!(s.reasons[0].1, "deleted 312 objects, 98% of its edits");
    }

    #[test]
    fn readme_carries_this_scorecard() {
        let readme = include_str!("../README.md");
        for row in include_str!("score.rs")
            .lines()
            .filter_map(|l| l.strip_prefix("//! | "))
        {
            assert!(readme.contains(&format!("| {row}")), "README lacks: {row}");
        }
    }

    #[test]
    fn imported_scores_replace_the_scorecard_where_given() {
        let mut c = base();
        c.id = 7;
        let s = Scoring::Imported {
            scores: [(7, 0.9)].into_iter().collect(),
            source: "x.csv".to_owned(),
        };
        let got = s.score(&c);
        assert_eq!(got.score, 0.9);
        assert_eq!(got.reasons[0].1, "score imported from x.csv");
        c.id = 8;
        let got = s.score(&c);
        assert_eq!(got.score, score(&c).score);
        assert!(got.reasons[0].1.starts_with("not in x.csv"));
    }

    #[test]
    fn earlier_vandalism_reverts_raise_the_score() {
        let c = base();
        let mut again = base();
        again.prior_vandalism_reverted = 1;
        assert!(score(&again).score > score(&c).score);
    }

    #[test]
    fn evidence_only_raises_the_score() {
        // Monotonic: each added piece of bad evidence raises the score.
        let mut c = base();
        let mut last = score(&c).score;
        c.comment.clear();
        for step in 0..4 {
            match step {
                0 => c.account_age_days = 2.0,
                1 => c.spam_names = 3,
                2 => c.offshore_creates = 5,
                _ => c.names_changed = 9,
            }
            let s = score(&c).score;
            assert!(s > last, "step {step}: {s} <= {last}");
            last = s;
        }
    }
}
