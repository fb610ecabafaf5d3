//! Labels from reverts: reading a changeset comment for "this reverts something", "it was
//! vandalism or spam", and the changeset ids it names; turning the database's revert comments
//! into `changeset_id,label` rows; and the index of reverted changesets that the mapper
//! features ("how often was earlier work reverted") read.
//!
//! The word lists below are the one place that knows how reverts and vandalism are described in
//! English, German, French, Spanish, Italian, Portuguese, Dutch, Polish, Russian, Swedish and
//! Czech. They are common practice in changeset comments, no source; extend them here.
//!
//! Matching works on words (Unicode letters and digits, lower-cased), so a stem matches the start
//! of a word: `vandal` matches "vandalism", "Vandalismus" and "vandalised" but not "antivandal";
//! `revers` does not match "irreversible". A vandalism word preceded closely by a negation ("not
//! vandalism", "kein Vandalismus", "pas du vandalisme") does not count.

use std::collections::{BTreeMap, HashSet};
use std::io::Write;
use std::path::{Path, PathBuf};

use rusqlite::OptionalExtension;

use crate::store::{Store, StoreError};

/// Word stems that say a changeset reverts, undoes or restores earlier work. Common practice,
/// no source.
#[rustfmt::skip]
pub const REVERT_STEMS: &[&str] = &[
    // English
    "revert", "undo", "undid", "undoing", "rollback", "rolled back", "roll back", "restore",
    // German
    "rückgängig", "zurückgesetzt", "zurücksetzen", "zurückgenommen", "wiederhergestellt",
    // French
    "annulation", "annulé", "annuler", "restauration", "rétabli",
    // Spanish
    "revertid", "revertir", "deshac", "deshech", "restaurad",
    // Italian
    "ripristin", "annullat",
    // Portuguese
    "reversão", "reverti", "desfeit", "desfaz",
    // Dutch
    "teruggedraaid", "terugdraai", "ongedaan", "hersteld",
    // Polish
    "cofnię", "cofnie", "wycofan", "przywróc",
    // Russian
    "откат", "отмен", "восстановл",
    // Swedish
    "återställ",
    // Czech
    "vráceno", "vrácení",
];

/// Word stems that cite vandalism, spam or deliberate damage. Common practice, no source.
#[rustfmt::skip]
pub const VANDALISM_STEMS: &[&str] = &[
    // English, and the shared root of German, French, Spanish, Italian, Portuguese, Dutch,
    // Swedish and Czech ("Vandalismus", "vandalisme", "vandalismo" ...)
    "vandal", "vándal", "spam", "malicious", "griefing",
    // German
    "mutwillig",
    // Polish
    "wandal",
    // Russian
    "вандал", "спам",
];

/// Words that, up to three words before a vandalism word, negate it ("not vandalism", "no
/// spam", "kein Vandalismus", "pas de vandalisme", "nie wandalizm", "не вандализм"). Common
/// practice, no source.
#[rustfmt::skip]
pub const NEGATIONS: &[&str] = &[
    "not", "no", "isn't", "wasn't", "wasn", "wasnt", "isnt", "never", "kein", "keine", "keinen", "nicht",
    "pas", "non", "sin", "nem", "niet", "geen", "nie", "не", "нет", "inte", "ingen", "není",
];

/// Words that put a following number in the changeset sense ("changeset 123", "Änderungssatz
/// 123", "cs 123"). Common practice, no source.
#[rustfmt::skip]
const CHANGESET_WORDS: &[&str] = &[
    "changeset", "changesets", "cs", "cset", "csets", "änderungssatz", "änderungssätze",
    "änderungssatzes", "conjunto", "groupe", "pakiet", "zestaw", "zestawu", "пакет", "пакеты",
    "пакета", "правку", "правки", "набор",
];

/// Words that make a following number an element id, never a changeset. Common practice, no
/// source.
#[rustfmt::skip]
const ELEMENT_WORDS: &[&str] = &[
    "node", "nodes", "way", "ways", "relation", "relations", "knoten", "weg", "wege",
    "relationen", "nœud", "noeud", "chemin", "nodo", "nodi", "nó", "vía", "punkt", "linia",
    "relacja", "точка", "линия", "отношение", "user", "uid", "issue", "ticket", "note", "version",
    "v",
];

/// A bare number counts as a changeset id only when it has at least this many digits (short
/// numbers are counts, house numbers, years) and follows a revert word.
const MIN_BARE_DIGITS: usize = 6;
/// Largest id read (OSM changeset ids are far below this).
const MAX_ID: i64 = 1_000_000_000_000;
/// A vandalism word with a negation this many words before it does not count.
const NEGATION_REACH: usize = 3;

/// What a comment says about reverting.
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct RevertComment {
    /// It says it reverts, undoes or restores something.
    pub reverts: bool,
    /// It cites vandalism or spam (not negated).
    pub cites_vandalism: bool,
    /// Changeset ids it names, in order of appearance, without repeats.
    pub changesets: Vec<i64>,
}

impl RevertComment {
    /// Whether the changesets it names are labelled as vandalism.
    #[must_use]
    pub fn labels_vandalism(&self) -> bool {
        self.reverts && self.cites_vandalism
    }
}

/// A token of a comment: a lower-cased word or number, and what came right before it.
#[derive(Debug)]
struct Token {
    text: String,
    /// The character just before the token (`#`, `/`, `+` ...), if any.
    before: Option<char>,
    /// The token is glued to the previous one by a dash or dot with no space ("555-0142",
    /// "2026-11-24", "1.2.3"), so a number in it is part of a longer figure.
    joined: bool,
    /// The token is glued to the next one the same way.
    joins_next: bool,
}

fn tokens(comment: &str) -> Vec<Token> {
    let mut out: Vec<Token> = Vec::new();
    let mut cur = String::new();
    let mut before = None;
    let mut prev_char: Option<char> = None;
    let mut glue_prev = false;
    let mut pending_glue = false;
    let chars: Vec<char> = comment.chars().collect();
    for (i, &c) in chars.iter().enumerate() {
        if c.is_alphanumeric() || (c == '\'' && !cur.is_empty()) {
            if cur.is_empty() {
                before = prev_char;
                glue_prev = pending_glue;
            }
            cur.extend(c.to_lowercase());
        } else {
            if !cur.is_empty() {
                let glue = matches!(c, '-' | '.' | ':' | '_')
                    && chars.get(i + 1).is_some_and(|n| n.is_ascii_digit())
                    && cur.chars().all(|d| d.is_ascii_digit());
                out.push(Token {
                    text: std::mem::take(&mut cur).trim_end_matches('\'').to_owned(),
                    before,
                    joined: glue_prev,
                    joins_next: glue,
                });
                pending_glue = glue;
            } else {
                pending_glue = false;
            }
        }
        prev_char = Some(c);
    }
    if !cur.is_empty() {
        out.push(Token {
            text: cur,
            before,
            joined: glue_prev,
            joins_next: false,
        });
    }
    out
}

/// Whether the words starting at `i` match `stem` (one word, or several separated by spaces).
fn stem_at(toks: &[Token], i: usize, stem: &str) -> bool {
    let mut parts = stem.split(' ').peekable();
    let mut k = i;
    while let Some(p) = parts.next() {
        let Some(t) = toks.get(k) else {
            return false;
        };
        let matches = if parts.peek().is_none() {
            t.text.starts_with(p)
        } else {
            t.text == p
        };
        if !matches {
            return false;
        }
        k += 1;
    }
    true
}

/// A quick test that may say yes wrongly but never no wrongly: whether `comment` could contain a
/// revert word, that is, whether its lower-cased text contains the first word of any of
/// [`REVERT_STEMS`] (a word starting with a stem is part of the lower-cased text). Comments that
/// fail it are not read further when building the revert index.
/// `lower` is a buffer for the lower-cased text, reused from comment to comment.
fn may_mention_revert(comment: &str, lower: &mut String) -> bool {
    lower.clear();
    lower.extend(comment.chars().flat_map(char::to_lowercase));
    REVERT_STEMS
        .iter()
        .any(|s| lower.contains(s.split(' ').next().unwrap_or(s)))
}

fn any_stem_at(toks: &[Token], i: usize, stems: &[&str]) -> bool {
    stems.iter().any(|s| stem_at(toks, i, s))
}

fn number(t: &Token) -> Option<i64> {
    if t.text.is_empty() || !t.text.chars().all(|c| c.is_ascii_digit()) {
        return None;
    }
    t.text.parse::<i64>().ok().filter(|&n| n > 0 && n < MAX_ID)
}

/// Reads a changeset comment: does it revert, does it cite vandalism, which changesets does it
/// name. Names count as ids when written `changeset 123` (or `changesets 123, 456 and 789`, in
/// the languages of [`CHANGESET_WORDS`]), `#123`, `.../changeset/123`, or as a bare number of at
/// least six digits after a revert word. Numbers after element words (`node 123`), inside dates,
/// phone numbers or versions (`2026-11-24`, `+1 555 0142`, `2.5.0`) never count.
#[must_use]
pub fn read_comment(comment: &str) -> RevertComment {
    let toks = tokens(comment);
    let mut out = RevertComment::default();
    let mut first_revert: Option<usize> = None;
    for i in 0..toks.len() {
        if any_stem_at(&toks, i, REVERT_STEMS) {
            out.reverts = true;
            first_revert.get_or_insert(i);
        }
        if any_stem_at(&toks, i, VANDALISM_STEMS) {
            let negated = (i.saturating_sub(NEGATION_REACH)..i)
                .any(|k| NEGATIONS.contains(&toks[k].text.as_str()));
            if !negated {
                out.cites_vandalism = true;
            }
        }
    }
    // Changeset ids.
    let mut in_list = false;
    for (i, t) in toks.iter().enumerate() {
        let prev = i.checked_sub(1).and_then(|k| toks.get(k));
        let Some(n) = number(t) else {
            let word = t.text.as_str();
            if CHANGESET_WORDS.contains(&word) || (word == "changeset" && t.before == Some('/')) {
                in_list = true;
            } else if !matches!(word, "and" | "und" | "et" | "y" | "e" | "en" | "i" | "и") {
                in_list = false;
            }
            continue;
        };
        if t.joined || t.joins_next || t.before == Some('+') {
            in_list = false;
            continue;
        }
        let after_element = prev.is_some_and(|p| ELEMENT_WORDS.contains(&p.text.as_str()))
            || (t.before == Some('/') && prev.is_some_and(|p| p.text != "changeset"));
        if after_element {
            in_list = false;
            continue;
        }
        let hashed = t.before == Some('#');
        let in_url = t.before == Some('/') && prev.is_some_and(|p| p.text == "changeset");
        // A long number next to a short one is part of a figure ("+49 151 12345678").
        let short_number = |k: Option<&Token>| {
            k.and_then(number)
                .is_some_and(|_| k.is_some_and(|k| k.text.len() < MIN_BARE_DIGITS))
        };
        let bare = first_revert.is_some_and(|r| r < i)
            && t.text.len() >= MIN_BARE_DIGITS
            && !short_number(prev)
            && !short_number(toks.get(i + 1));
        if (in_list || hashed || in_url || bare) && !out.changesets.contains(&n) {
            out.changesets.push(n);
        }
    }
    out
}

/// One changeset comment from the database that reverts something.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Revert {
    /// The reverting changeset.
    pub id: i64,
    /// When it was opened (Unix seconds).
    pub created_at: i64,
    /// Whether it cites vandalism.
    pub vandalism: bool,
    /// The changesets it names that exist in the database, were opened before it and are not
    /// itself.
    pub targets: Vec<i64>,
}

/// Every revert the database's changeset comments describe, and who was reverted when.
#[derive(Debug, Default, Clone)]
pub struct RevertIndex {
    /// Reverts in order of time.
    pub reverts: Vec<Revert>,
    /// Reverted changeset → (time of its first revert, whether any revert of it cites vandalism
    /// and when the first such revert was).
    reverted: foldhash::HashMap<i64, RevertedBy>,
    /// Ids named by revert comments that are not changesets of the database (or not earlier).
    pub unknown_targets: usize,
}

/// How a changeset was reverted.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RevertedBy {
    /// First revert naming it.
    pub first: i64,
    /// First revert naming it that cites vandalism.
    pub first_vandalism: Option<i64>,
}

impl RevertIndex {
    /// Reads every changeset comment of the database.
    ///
    /// # Errors
    /// On database failure.
    pub fn load(store: &Store) -> Result<Self, StoreError> {
        let conn = store.conn();
        // One pass over every changeset in key order (no sort), comments borrowed from the row
        // with one lower-casing buffer; only the revert comments are kept. Their targets' start
        // times are then read by key, instead of holding every changeset's start time (about
        // 42 MB at the 16x benchmark) and sorting the table by time (BENCHMARKS.md, "Lookups
        // at scale").
        let mut candidates: Vec<(i64, i64, RevertComment)> = Vec::new();
        {
            let mut st = conn
                .prepare("SELECT id, created_at, comment FROM changesets")
                .map_err(|e| store.map_err(e))?;
            let mut rows = st.query([]).map_err(|e| store.map_err(e))?;
            let mut lower = String::new();
            while let Some(r) = rows.next().map_err(|e| store.map_err(e))? {
                let comment = r
                    .get_ref(2)
                    .and_then(|v| {
                        v.as_str().map_err(|e| {
                            rusqlite::Error::FromSqlConversionFailure(2, v.data_type(), Box::new(e))
                        })
                    })
                    .map_err(|e| store.map_err(e))?;
                if comment.is_empty() || !may_mention_revert(comment, &mut lower) {
                    continue;
                }
                let rc = read_comment(comment);
                if rc.reverts && !rc.changesets.is_empty() {
                    let (id, t): (i64, i64) = (
                        r.get(0).map_err(|e| store.map_err(e))?,
                        r.get(1).map_err(|e| store.map_err(e))?,
                    );
                    candidates.push((id, t, rc));
                }
            }
        }
        // In time order, as the reverts are listed.
        candidates.sort_by_key(|c| (c.1, c.0));
        let mut created: foldhash::HashMap<i64, Option<i64>> = foldhash::HashMap::default();
        {
            let mut st = conn
                .prepare_cached("SELECT created_at FROM changesets WHERE id = ?1")
                .map_err(|e| store.map_err(e))?;
            for target in candidates
                .iter()
                .flat_map(|c| c.2.changesets.iter().copied())
            {
                if let std::collections::hash_map::Entry::Vacant(v) = created.entry(target) {
                    let t = st
                        .query_row([target], |r| r.get::<_, i64>(0))
                        .optional()
                        .map_err(|e| store.map_err(e))?;
                    v.insert(t);
                }
            }
        }
        let mut index = Self::default();
        for (id, t, rc) in candidates {
            let mut targets = Vec::new();
            for target in rc.changesets {
                match created.get(&target).copied().flatten() {
                    Some(tt) if target != id && tt <= t => targets.push(target),
                    _ => index.unknown_targets += 1,
                }
            }
            if targets.is_empty() {
                continue;
            }
            for &target in &targets {
                let e = index.reverted.entry(target).or_insert(RevertedBy {
                    first: t,
                    first_vandalism: None,
                });
                e.first = e.first.min(t);
                if rc.cites_vandalism {
                    e.first_vandalism = Some(e.first_vandalism.map_or(t, |v| v.min(t)));
                }
            }
            index.reverts.push(Revert {
                id,
                created_at: t,
                vandalism: rc.cites_vandalism,
                targets,
            });
        }
        Ok(index)
    }

    /// How a changeset was reverted, if it was.
    #[must_use]
    pub fn reverted(&self, changeset: i64) -> Option<RevertedBy> {
        self.reverted.get(&changeset).copied()
    }
}

/// Settings of [`derive_labels`].
#[derive(Debug, Clone, Copy)]
pub struct LabelOptions {
    /// Unreverted changesets count as negatives only when made at least this many days before
    /// the newest changeset of the database (time for a revert to have happened).
    pub settle_days: f64,
}

impl Default for LabelOptions {
    fn default() -> Self {
        Self { settle_days: 14.0 }
    }
}

/// What [`derive_labels`] found.
#[derive(Debug, Clone, Default)]
pub struct Labels {
    /// changeset id → 1 (vandalism cited) or 0.
    pub labels: BTreeMap<i64, u8>,
    /// Revert changesets found.
    pub reverts: usize,
    /// Of which citing vandalism.
    pub vandalism_reverts: usize,
    /// Negatives that were reverted without vandalism cited.
    pub reverted_negatives: usize,
    /// Changeset ids named by reverts that the database does not hold.
    pub unknown_targets: usize,
}

/// Derives labels from the database's revert comments.
///
/// - **1**: a changeset named by a revert whose comment says it reverts and cites vandalism or
///   spam.
/// - **0**: a changeset named only by reverts that cite no vandalism (reverted mistakes), and
///   every other changeset with edits in the database that no revert names, made at least
///   [`LabelOptions::settle_days`] before the newest changeset, by a mapper none of whose
///   changesets is labelled 1. Unreverted vandalism makes some of these wrong; they are
///   "presumed fine", not verified.
/// - No label: recent unreverted changesets, other work of mappers with a positive label, and
///   changesets without edits in the database (features need edits).
///
/// # Errors
/// On database failure.
pub fn derive_labels(store: &Store, opts: &LabelOptions) -> Result<Labels, StoreError> {
    let index = RevertIndex::load(store)?;
    let conn = store.conn();
    let mut out = Labels {
        reverts: index.reverts.len(),
        vandalism_reverts: index.reverts.iter().filter(|r| r.vandalism).count(),
        unknown_targets: index.unknown_targets,
        ..Labels::default()
    };
    let with_edits: HashSet<i64> = store
        .edited_changesets()?
        .into_iter()
        .map(|(id, _)| id)
        .collect();
    let newest: Option<i64> = conn
        .query_row("SELECT MAX(created_at) FROM changesets", [], |r| r.get(0))
        .map_err(|e| store.map_err(e))?;
    #[allow(clippy::cast_possible_truncation, reason = "days to seconds, small")]
    let settle = (opts.settle_days.max(0.0) * 86_400.0) as i64;
    let cutoff = newest.map_or(i64::MIN, |n| n - settle);

    let mut st = conn
        .prepare("SELECT id, uid, created_at FROM changesets ORDER BY id")
        .map_err(|e| store.map_err(e))?;
    let rows: Vec<(i64, i64, i64)> = st
        .query_map([], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)))
        .map_err(|e| store.map_err(e))?
        .collect::<Result<_, _>>()
        .map_err(|e| store.map_err(e))?;
    let mut bad_uids = HashSet::new();
    for &(id, uid, _) in &rows {
        if index
            .reverted(id)
            .is_some_and(|r| r.first_vandalism.is_some())
        {
            out.labels.insert(id, 1);
            bad_uids.insert(uid);
        }
    }
    for &(id, uid, t) in &rows {
        match index.reverted(id) {
            Some(r) if r.first_vandalism.is_some() => {}
            Some(_) => {
                if !bad_uids.contains(&uid) {
                    out.labels.insert(id, 0);
                    out.reverted_negatives += 1;
                }
            }
            None => {
                if t <= cutoff && with_edits.contains(&id) && !bad_uids.contains(&uid) {
                    out.labels.insert(id, 0);
                }
            }
        }
    }
    Ok(out)
}

/// Errors reading or writing a labels file.
#[derive(Debug, thiserror::Error)]
pub enum LabelsFileError {
    #[error("{path}: {source}")]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{path}:{line}: {message}")]
    Format {
        path: PathBuf,
        line: u64,
        message: String,
    },
}

/// Writes `changeset_id,label` rows in id order.
///
/// # Errors
/// When the file cannot be written.
pub fn write_labels(path: &Path, labels: &BTreeMap<i64, u8>) -> Result<(), LabelsFileError> {
    let io = |source| LabelsFileError::Io {
        path: path.to_owned(),
        source,
    };
    let file = std::fs::File::create(path).map_err(io)?;
    let mut w = std::io::BufWriter::new(file);
    writeln!(w, "changeset_id,label").map_err(io)?;
    for (id, l) in labels {
        writeln!(w, "{id},{l}").map_err(io)?;
    }
    w.flush().map_err(io)
}

/// Reads a `changeset_id,<column>` CSV with a header row, where the second column is parsed
/// by `value` (which says what is wrong in words). Rows repeat an id at most once.
///
/// # Errors
/// [`LabelsFileError`] naming the file and line of the first bad row.
pub fn read_id_csv<T>(
    path: &Path,
    column: &str,
    value: impl Fn(&str) -> Result<T, String>,
) -> Result<BTreeMap<i64, T>, LabelsFileError> {
    let mut r = csv::ReaderBuilder::new()
        .trim(csv::Trim::All)
        .from_path(path)
        .map_err(|e| csv_error(path, &e))?;
    let fmt = |line: u64, message: String| LabelsFileError::Format {
        path: path.to_owned(),
        line,
        message,
    };
    let headers = r.headers().map_err(|e| csv_error(path, &e))?.clone();
    if headers.get(0) != Some("changeset_id") || headers.get(1) != Some(column) {
        return Err(fmt(1, format!("the header must be changeset_id,{column}")));
    }
    let mut out = BTreeMap::new();
    for rec in r.records() {
        let rec = rec.map_err(|e| csv_error(path, &e))?;
        let line = rec.position().map_or(0, csv::Position::line);
        let id = rec
            .get(0)
            .and_then(|s| s.parse::<i64>().ok())
            .filter(|&n| n > 0)
            .ok_or_else(|| {
                fmt(
                    line,
                    format!("{:?} is not a changeset id", rec.get(0).unwrap_or("")),
                )
            })?;
        let v = value(rec.get(1).unwrap_or("")).map_err(|m| fmt(line, m))?;
        if out.insert(id, v).is_some() {
            return Err(fmt(line, format!("changeset {id} appears twice")));
        }
    }
    Ok(out)
}

fn csv_error(path: &Path, e: &csv::Error) -> LabelsFileError {
    match e.kind() {
        csv::ErrorKind::Io(io) => LabelsFileError::Io {
            path: path.to_owned(),
            source: std::io::Error::new(io.kind(), io.to_string()),
        },
        _ => LabelsFileError::Format {
            path: path.to_owned(),
            line: e.position().map_or(0, csv::Position::line),
            message: e.to_string(),
        },
    }
}

/// Reads a labels file (`changeset_id,label`, labels 0 or 1).
///
/// # Errors
/// [`LabelsFileError`] naming the file and line of the first bad row.
pub fn read_labels(path: &Path) -> Result<BTreeMap<i64, u8>, LabelsFileError> {
    read_id_csv(path, "label", |s| match s {
        "0" => Ok(0),
        "1" => Ok(1),
        other => Err(format!("label {other:?} is not 0 or 1")),
    })
}

/// Reads a scores file (`changeset_id,score`, scores in [0, 1]).
///
/// # Errors
/// [`LabelsFileError`] naming the file and line of the first bad row.
pub fn read_scores(path: &Path) -> Result<BTreeMap<i64, f64>, LabelsFileError> {
    read_id_csv(path, "score", |s| {
        s.parse::<f64>()
            .ok()
            .filter(|v| (0.0..=1.0).contains(v))
            .ok_or_else(|| format!("score {s:?} is not a number from 0 to 1"))
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_quick_revert_test_never_misses() {
        // Every comment of the fixtures and a few made here that read as reverting must pass the
        // quick test; it may pass ones that do not.
        let text = std::fs::read_to_string(
            std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("fixtures/labels/comments.csv"),
        )
        .unwrap();
        let mut comments: Vec<String> = csv::Reader::from_reader(text.as_bytes())
            .records()
            .map(|r| r.unwrap()[0].to_owned())
            .collect();
        comments.extend(
            [
                "ROLLED-BACK the edits",
                "Rolled   back",
                "UNDO'S",
                "ÅTERSTÄLLD",
                "ОТКАТ правки 123456",
                "restored shops",
            ]
            .map(str::to_owned),
        );
        let mut reverting = 0;
        for c in &comments {
            if read_comment(c).reverts {
                reverting += 1;
                assert!(may_mention_revert(c, &mut String::new()), "{c}");
            }
        }
        assert!(reverting >= 20, "{reverting}");
        assert!(!may_mention_revert(
            "Added shops along the high street",
            &mut String::new()
        ));
    }

    #[test]
    fn words_match_at_word_starts_only() {
        assert!(read_comment("Reverted vandalism").labels_vandalism());
        assert!(!read_comment("irreversible change").reverts);
        assert!(!read_comment("revert: antivandal bot test").cites_vandalism);
        assert!(read_comment("roll back spam").labels_vandalism());
    }

    #[test]
    fn negated_vandalism_does_not_count() {
        let c = read_comment("revert 123456789, not vandalism, just a mistake");
        assert!(c.reverts && !c.cites_vandalism);
        assert_eq!(c.changesets, vec![123_456_789]);
    }
}
