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
//! | no comment | +0.4 | weak, but adds up |
//! | a comment of 15+ characters | -0.3 | explains the work |
//!
//! Weights are set by hand from the reasoning above (common practice for scorecards, no source);
//! fitting them from labelled reverts is separate work.

use crate::features::ChangesetFeatures;

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
