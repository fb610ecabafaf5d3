//! The mapper population: established mappers with a skewed share of the work and a history of
//! earlier changesets (months to years before the diff period), ordinary newcomers whose accounts
//! start during the period, and the accounts the incidents use. User ids follow account age.

use rand::seq::SliceRandom;
use rand::Rng;
use rand_chacha::ChaCha8Rng;

use super::geography::{Area, Geo};
use super::names::{self, Names, EDITORS, SOURCES};
use super::sample::{lognormal_count, weighted};
use super::world::{Bbox, ChangesetMeta};

/// First user id.
const UID_BASE: i64 = 9_000_001;
/// First changeset id.
pub(super) const CHANGESET_BASE: i64 = 900_000_001;
/// Established mappers.
const ESTABLISHED: usize = 300;
/// Seconds in a day.
pub(super) const DAY: i64 = 86_400;

/// What an account is for in the scenario.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(super) enum Role {
    Established,
    Newcomer,
    Incident,
}

/// A mapper.
pub(super) struct User {
    pub uid: i64,
    pub name: String,
    pub editor: &'static str,
    /// Where most of their work happens.
    pub home: Area,
    /// Share of the established mappers' ordinary work (0 for others).
    pub weight: f64,
    pub role: Role,
    /// When the account's first changeset is (or is planned to be), for ordering user ids.
    pub first: i64,
}

/// Everyone in the scenario.
pub(super) struct People {
    pub users: Vec<User>,
}

fn home_area(rng: &mut ChaCha8Rng) -> Area {
    let areas: Vec<(Area, f64)> = Area::all().map(|a| (a, a.activity_weight())).collect();
    weighted(rng, &areas).unwrap_or(Area::Town)
}

impl People {
    /// Established mappers with Zipf-like weights; account starts months to years before
    /// `period_start`.
    pub fn new(rng: &mut ChaCha8Rng, names: &mut Names, period_start: i64) -> Self {
        let mut users = Vec::new();
        let norm: f64 = (1..=ESTABLISHED).map(|r| 1.0 / (r as f64).powf(0.95)).sum();
        for r in 1..=ESTABLISHED {
            let days_before = rng.gen_range(60..2900);
            users.push(User {
                uid: 0,
                name: names.handle(rng),
                editor: EDITORS.choose(rng).copied().unwrap_or("Marrowdraw 2.5.0"),
                home: home_area(rng),
                weight: 1.0 / (r as f64).powf(0.95) / norm,
                role: Role::Established,
                first: period_start - days_before * DAY - rng.gen_range(0..DAY),
            });
        }
        Self { users }
    }

    /// Adds an account whose first changeset is at about `first`; returns its index.
    pub fn add(
        &mut self,
        rng: &mut ChaCha8Rng,
        names: &mut Names,
        role: Role,
        home: Option<Area>,
        editor: Option<&'static str>,
        first: i64,
    ) -> u32 {
        let home = home.unwrap_or_else(|| home_area(rng));
        let editor = editor
            .or_else(|| EDITORS.choose(rng).copied())
            .unwrap_or("Marrowdraw 2.5.0");
        self.users.push(User {
            uid: 0,
            name: names.handle(rng),
            editor,
            home,
            weight: 0.0,
            role,
            first,
        });
        u32::try_from(self.users.len() - 1).unwrap_or(u32::MAX)
    }

    /// Gives user ids in order of account start, as a real database would.
    pub fn assign_uids(&mut self) {
        let mut order: Vec<usize> = (0..self.users.len()).collect();
        order.sort_by_key(|&i| (self.users[i].first, i));
        for (rank, i) in order.into_iter().enumerate() {
            self.users[i].uid = UID_BASE + i64::try_from(rank).unwrap_or(0);
        }
    }

    /// Weighted pick of an established mapper.
    pub fn pick_established(&self, rng: &mut ChaCha8Rng, table: &[(u32, f64)]) -> u32 {
        weighted(rng, table).unwrap_or(0)
    }

    /// The table [`People::pick_established`] draws from.
    pub fn established_table(&self) -> Vec<(u32, f64)> {
        self.users
            .iter()
            .enumerate()
            .filter(|(_, u)| u.role == Role::Established)
            .map(|(i, u)| (u32::try_from(i).unwrap_or(0), u.weight))
            .collect()
    }
}

const HISTORY_COMMENTS: [&str; 8] = [
    "add buildings in {place}",
    "map streets and paths around {place}",
    "add shops and amenities in {place}",
    "fix tags in {place}",
    "add house numbers in {place}",
    "landuse around {place}",
    "small fixes",
    "update opening hours in {place}",
];

/// Changeset tags for an ordinary changeset: comment (when given), editor, sometimes a source.
pub(super) fn changeset_tags(
    rng: &mut ChaCha8Rng,
    comment: Option<String>,
    editor: &'static str,
) -> Vec<(&'static str, String)> {
    let mut t = Vec::new();
    if let Some(c) = comment {
        t.push(("comment", c));
    }
    t.push(("created_by", editor.to_owned()));
    if rng.gen_bool(0.5) {
        if let Some(s) = SOURCES.choose(rng) {
            t.push(("source", (*s).to_owned()));
        }
    }
    t
}

/// Earlier changesets (before the diff period) of every established mapper and of `extra`
/// accounts given as (user, number of changesets). Sorted by time and numbered from
/// [`CHANGESET_BASE`]; each carries the area it was made in.
pub(super) fn history(
    rng: &mut ChaCha8Rng,
    people: &People,
    extra: &[(u32, u32)],
    period_start: i64,
) -> Vec<(ChangesetMeta, Area)> {
    let mut plans: Vec<(i64, u32)> = Vec::new();
    for (i, u) in people.users.iter().enumerate() {
        let Ok(ui) = u32::try_from(i) else { continue };
        let count = match u.role {
            Role::Established => {
                let base = (u.weight * 2500.0).round();
                // Weighted share plus a few, so even quiet accounts have some history.
                lognormal_count(rng, 4.0, 0.7, 1, 40) + base.clamp(0.0, 400.0) as u32
            }
            _ => match extra.iter().find(|(x, _)| *x == ui) {
                Some(&(_, n)) => n,
                None => continue,
            },
        };
        let span = (period_start - DAY - u.first).max(DAY);
        plans.push((u.first, ui));
        for _ in 1..count {
            plans.push((u.first + rng.gen_range(0..span), ui));
        }
    }
    plans.sort_unstable();
    plans
        .into_iter()
        .enumerate()
        .map(|(k, (created_at, user))| {
            let u = &people.users[user as usize];
            let area = if rng.gen_bool(0.8) {
                u.home
            } else {
                home_area(rng)
            };
            let comment = rng
                .gen_bool(0.85)
                .then(|| names::comment(rng, &HISTORY_COMMENTS, area.label()));
            let meta = ChangesetMeta {
                id: CHANGESET_BASE + i64::try_from(k).unwrap_or(0),
                user,
                created_at,
                closed_at: created_at + rng.gen_range(60..5400),
                bbox: None,
                num_changes: 0,
                tags: changeset_tags(rng, comment, u.editor),
            };
            (meta, area)
        })
        .collect()
}

/// Gives history changesets that received no snapshot element a plausible box and size.
pub(super) fn finish_history(rng: &mut ChaCha8Rng, geo: &Geo, hist: &mut [(ChangesetMeta, Area)]) {
    for (cs, area) in hist.iter_mut() {
        if cs.bbox.is_none() {
            let c = geo.sample(*area, rng);
            let r = area.spread();
            for _ in 0..2 {
                let p = super::geography::jitter(c, r, rng);
                let (lat, lon) = p.to_e7();
                Bbox::extend(&mut cs.bbox, lat, lon);
            }
        }
        if cs.num_changes < 3 {
            cs.num_changes += lognormal_count(rng, 12.0, 1.0, 1, 300);
        }
    }
}
