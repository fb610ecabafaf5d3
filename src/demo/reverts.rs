//! Earlier weeks' vandalism and its reverts: the ground truth `hexvigil labels` learns from.
//!
//! In every week but the first and the last, one or two invented accounts damage the map (shop
//! names replaced by adverts, objects stripped of their tags, or points deleted), in one or two
//! changesets, and within one to three days an established mapper reverts the damage with a
//! comment that cites vandalism or spam in one of several languages and names the reverted
//! changesets. Each such week also has an honest mistake: an established mapper drags a
//! building a few hundred metres by accident and reverts it the same or the next day with a
//! comment that says revert but cites no vandalism. Everything ends before the report week, so
//! the last week's four incidents stay unreverted and unlabelled.
//!
//! Decisions here draw from their own random stream (derived from the seed), so the ordinary
//! mapping keeps its character; the cases are listed in `incidents.json` under `earlier`.

use rand::Rng;
use rand_chacha::ChaCha8Rng;
use serde::{Deserialize, Serialize};

use super::geography::{jitter, Area, Geo, P, VILLAGES};
use super::names::{Names, EDITORS};
use super::people::{People, Role, DAY};
use super::sample::choose_n;
use super::world::{set_tag, tag, Item, Kind, Session, Tags, ALL_KINDS};
use super::{timed, DemoError};

/// How an earlier case damaged the map.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Damage {
    /// Names of shops and amenities replaced by adverts with a web address.
    AdvertNames,
    /// Objects stripped of all but one tag.
    StripTags,
    /// Stand-alone points deleted.
    DeletePoints,
}

impl Damage {
    fn name(self) -> &'static str {
        match self {
            Self::AdvertNames => "advert_names",
            Self::StripTags => "tags_stripped",
            Self::DeletePoints => "points_deleted",
        }
    }
}

/// Advert texts of the earlier cases (the reserved `.example` domain; invented brands).
const ADVERTS: [&str; 4] = [
    "Cheap watches at www.tickvault-deals.example",
    "Best loans http://quickcoin-lend.example",
    "Follicle clinic www.hairnova-offer.example",
    "Casino bonus at www.spinlucky-club.example",
];

/// Revert comments that cite vandalism, by language; `{ids}` is filled per style.
const VANDALISM_REVERTS: [(&str, IdStyle); 10] = [
    ("Revert vandalism from changeset {ids}", IdStyle::Plain),
    ("Reverted spam, see {ids}", IdStyle::Url),
    ("Vandalismus rückgängig gemacht, siehe {ids}", IdStyle::Hash),
    (
        "Annulation du vandalisme du changeset {ids}",
        IdStyle::Plain,
    ),
    (
        "Revertido vandalismo del conjunto de cambios {ids}",
        IdStyle::Plain,
    ),
    (
        "Ripristino dopo vandalismo, changeset {ids}",
        IdStyle::Plain,
    ),
    ("Revertido vandalismo do changeset {ids}", IdStyle::Plain),
    ("Vandalisme teruggedraaid (changeset {ids})", IdStyle::Plain),
    ("Cofnięcie wandalizmu z zestawu zmian {ids}", IdStyle::Plain),
    ("Откат вандализма, пакет правок {ids}", IdStyle::Plain),
];

/// Revert comments of honest mistakes: they say revert, cite no vandalism.
const MISTAKE_REVERTS: [(&str, IdStyle); 5] = [
    ("revert accidental move", IdStyle::None),
    (
        "Undo my changeset {ids}: building dragged by accident",
        IdStyle::Plain,
    ),
    (
        "revert {ids}, not vandalism, just a slip of the mouse",
        IdStyle::Plain,
    ),
    (
        "Änderungssatz {ids} rückgängig gemacht (versehentlich verschoben)",
        IdStyle::Plain,
    ),
    (
        "annulation du changeset {ids} : déplacement involontaire",
        IdStyle::Plain,
    ),
];

/// Comments of the accidental moves themselves.
const MISTAKE_COMMENTS: [&str; 3] = [
    "fix building outline",
    "align buildings with imagery",
    "small geometry fixes",
];

/// How a comment writes changeset ids.
#[derive(Debug, Clone, Copy)]
enum IdStyle {
    /// `900001234 and 900001240`
    Plain,
    /// `#900001234, #900001240`
    Hash,
    /// changeset URLs
    Url,
    /// No ids.
    None,
}

fn write_ids(template: &str, style: IdStyle, ids: &[i64]) -> String {
    let list: Vec<String> = match style {
        IdStyle::Plain | IdStyle::None => ids.iter().map(ToString::to_string).collect(),
        IdStyle::Hash => ids.iter().map(|i| format!("#{i}")).collect(),
        IdStyle::Url => ids
            .iter()
            .map(|i| format!("https://www.openstreetmap.org/changeset/{i}"))
            .collect(),
    };
    let joined = match list.as_slice() {
        [] => String::new(),
        [one] => one.clone(),
        [rest @ .., last] => format!("{} and {last}", rest.join(", ")),
    };
    template.replace("{ids}", &joined)
}

/// What one changeset of an earlier case does.
#[derive(Debug, Clone, Copy)]
pub(super) enum Step {
    /// A vandal changeset of case `case`.
    Vandal { case: usize },
    /// The revert of case `case`.
    Revert { case: usize },
    /// An accidental large move of mistake `case`.
    Mistake { case: usize },
    /// Its revert.
    MistakeRevert { case: usize },
}

/// A planned changeset of an earlier case.
pub(super) struct Planned {
    pub created_at: i64,
    pub upload: i64,
    pub user: u32,
    pub step: Step,
}

/// How to undo one edit.
enum Undo {
    NodeTags(u32, Tags),
    WayTags(u32, Tags),
    Recreate(P, Tags),
    NodePos(u32, i32, i32),
}

struct Case {
    damage: Damage,
    area: Area,
    /// Vandal changesets, once written.
    changesets: Vec<i64>,
    undo: Vec<Undo>,
    comment: usize,
    revert: Option<i64>,
    revert_comment: String,
}

struct Mistake {
    changeset: Option<i64>,
    undo: Vec<Undo>,
    comment: usize,
    revert: Option<i64>,
    revert_comment: String,
}

/// State of the earlier cases between their changesets.
pub(super) struct State {
    cases: Vec<Case>,
    mistakes: Vec<Mistake>,
}

/// One earlier case in `incidents.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EarlierCase {
    /// `advert_names`, `tags_stripped`, `points_deleted` or `accidental_move`.
    pub kind: String,
    /// Whether the case is vandalism (the revert cites it) or an honest mistake.
    pub vandalism: bool,
    /// The reverted changesets.
    pub changesets: Vec<i64>,
    /// The reverting changeset.
    pub reverted_by: i64,
    /// Its comment.
    pub revert_comment: String,
}

/// Plans the earlier cases of a period of `weeks` weeks from `first_day` (day number): accounts,
/// times and steps. Returns the plan, the state, and accounts needing earlier history as
/// (user, changesets) for [`super::people::history`].
pub(super) fn plan(
    rng: &mut ChaCha8Rng,
    people: &mut People,
    names: &mut Names,
    first_day: i64,
    weeks: u32,
) -> (Vec<Planned>, State, Vec<(u32, u32)>) {
    let mut plans = Vec::new();
    let mut state = State {
        cases: Vec::new(),
        mistakes: Vec::new(),
    };
    let mut extra = Vec::new();
    let last_monday = (first_day + i64::from(weeks.saturating_sub(1)) * 7) * DAY;
    let period_start = first_day * DAY;
    let table = people.established_table();
    for week in 1..weeks.saturating_sub(1) {
        let monday = (first_day + i64::from(week) * 7) * DAY;
        for _ in 0..rng.gen_range(1..=2) {
            let day = monday + rng.gen_range(0..5) * DAY;
            let start = day + rng.gen_range(8..21) * 3600 + rng.gen_range(0..3600);
            let damage = match rng.gen_range(0..3) {
                0 => Damage::AdvertNames,
                1 => Damage::StripTags,
                _ => Damage::DeletePoints,
            };
            // Most vandals are brand-new accounts; a third have a quiet history of their own.
            let sleeper = rng.gen_bool(0.33);
            let first = if sleeper {
                period_start - rng.gen_range(60..900) * DAY
            } else {
                start
            };
            let editor = EDITORS[rng.gen_range(0..EDITORS.len())];
            // Away from the town centre and the surge's village, where the report week's
            // incidents happen, so their baselines stay those of ordinary mapping.
            let home = [
                Area::Town,
                Area::Village(0),
                Area::Village(2),
                Area::Village(3),
            ][rng.gen_range(0..4)];
            let user = people.add(rng, names, Role::Incident, Some(home), Some(editor), first);
            if sleeper {
                extra.push((user, rng.gen_range(2..=12)));
            }
            let area = people.users[user as usize].home;
            let parts = if rng.gen_bool(0.3) { 2 } else { 1 };
            let case = state.cases.len();
            let mut t = start;
            for _ in 0..parts {
                let (created_at, upload) = timed(t, rng.gen_range(300..1500));
                plans.push(Planned {
                    created_at,
                    upload,
                    user,
                    step: Step::Vandal { case },
                });
                t = upload + rng.gen_range(1800..4 * 3600);
            }
            let reverter = super::sample::weighted(rng, &table).unwrap_or(0);
            let at = (t + rng.gen_range(1..=3) * DAY).min(last_monday - 3 * 3600);
            let (created_at, upload) = timed(at, rng.gen_range(300..1200));
            plans.push(Planned {
                created_at,
                upload,
                user: reverter,
                step: Step::Revert { case },
            });
            state.cases.push(Case {
                damage,
                area,
                changesets: Vec::new(),
                undo: Vec::new(),
                comment: rng.gen_range(0..VANDALISM_REVERTS.len()),
                revert: None,
                revert_comment: String::new(),
            });
        }
        // One honest mistake, reverted by its own author.
        let day = monday + rng.gen_range(0..5) * DAY;
        let start = day + rng.gen_range(8..20) * 3600;
        let user = super::sample::weighted(rng, &table).unwrap_or(0);
        let case = state.mistakes.len();
        let (created_at, upload) = timed(start, rng.gen_range(300..900));
        plans.push(Planned {
            created_at,
            upload,
            user,
            step: Step::Mistake { case },
        });
        let at = (upload + rng.gen_range(2..30) * 3600).min(last_monday - 3 * 3600);
        let (created_at, upload) = timed(at, rng.gen_range(120..600));
        plans.push(Planned {
            created_at,
            upload,
            user,
            step: Step::MistakeRevert { case },
        });
        state.mistakes.push(Mistake {
            changeset: None,
            undo: Vec::new(),
            comment: rng.gen_range(0..MISTAKE_REVERTS.len()),
            revert: None,
            revert_comment: String::new(),
        });
    }
    (plans, state, extra)
}

/// Free named points (shops and amenities) near `focus`.
fn named_points(s: &Session<'_>, focus: P, r: f64) -> Vec<u32> {
    s.world
        .near(focus, r, &[Kind::Poi, Kind::Shop], |w, it| match it {
            Item::Node(x) => {
                let n = w.node(x);
                matches!(n.kind, Kind::Poi | Kind::Shop)
                    && n.refs == 0
                    && tag(&n.tags, "name").is_some()
            }
            Item::Way(_) => false,
        })
        .into_iter()
        .filter(|&it| s.free(it))
        .filter_map(|it| match it {
            Item::Node(x) => Some(x),
            Item::Way(_) => None,
        })
        .collect()
}

/// Runs one changeset of an earlier case in `s`.
pub(super) fn run(
    step: Step,
    s: &mut Session<'_>,
    rng: &mut ChaCha8Rng,
    geo: &Geo,
    state: &mut State,
) -> Result<(), DemoError> {
    match step {
        Step::Vandal { case } => {
            let Some(c) = state.cases.get_mut(case) else {
                return Ok(());
            };
            let focus = geo.sample(c.area, rng);
            match c.damage {
                Damage::AdvertNames => {
                    let mut pool = named_points(s, focus, 0.8);
                    let text = ADVERTS[rng.gen_range(0..ADVERTS.len())];
                    let n = rng.gen_range(6..=12);
                    for x in choose_n(rng, &mut pool, n) {
                        c.undo.push(Undo::NodeTags(x, s.world.node(x).tags.clone()));
                        s.modify_node(x, |node| set_tag(&mut node.tags, "name", text))?;
                    }
                }
                Damage::StripTags => {
                    let mut pool: Vec<Item> = s
                        .world
                        .near(focus, 0.8, &ALL_KINDS, |w, it| match it {
                            Item::Node(x) => w.node(x).refs == 0 && w.node(x).tags.len() >= 4,
                            Item::Way(x) => w.way(x).tags.len() >= 4 && !w.way(x).in_rel,
                        })
                        .into_iter()
                        .filter(|&it| s.free(it))
                        .collect();
                    let n = rng.gen_range(5..=10);
                    for it in choose_n(rng, &mut pool, n) {
                        match it {
                            Item::Node(x) => {
                                c.undo.push(Undo::NodeTags(x, s.world.node(x).tags.clone()));
                                s.modify_node(x, |node| node.tags.truncate(1))?;
                            }
                            Item::Way(x) => {
                                c.undo.push(Undo::WayTags(x, s.world.way(x).tags.clone()));
                                s.modify_way_tags(x, |t| t.truncate(1))?;
                            }
                        }
                    }
                }
                Damage::DeletePoints => {
                    let mut pool = named_points(s, focus, 1.0);
                    let n = rng.gen_range(20..=35);
                    for x in choose_n(rng, &mut pool, n) {
                        let node = s.world.node(x);
                        c.undo.push(Undo::Recreate(
                            P::from_e7(node.lat, node.lon),
                            node.tags.clone(),
                        ));
                        s.delete_node(x)?;
                    }
                }
            }
            if s.changes == 0 {
                // Nothing to damage here: a lone advert point, so the changeset is not empty.
                let p = jitter(focus, 0.05, rng);
                let t = vec![
                    ("shop".to_owned(), "yes".to_owned()),
                    ("name".to_owned(), ADVERTS[0].to_owned()),
                ];
                s.create_node(p, t, Kind::Poi)?;
            }
        }
        Step::Revert { case } => {
            if let Some(c) = state.cases.get_mut(case) {
                undo(s, &c.undo)?;
            }
        }
        Step::Mistake { case } => {
            let Some(m) = state.mistakes.get_mut(case) else {
                return Ok(());
            };
            let area = if rng.gen_bool(0.5) {
                Area::Town
            } else {
                Area::Village(rng.gen_range(0..VILLAGES.len()))
            };
            let focus = geo.sample(area, rng);
            let mut pool: Vec<Item> = s
                .world
                .near(
                    focus,
                    0.5,
                    &[Kind::Building],
                    |w, it| matches!(it, Item::Way(x) if w.way(x).kind == Kind::Building),
                )
                .into_iter()
                .filter(|&it| s.free(it))
                .collect();
            let angle = rng.gen_range(0.0..std::f64::consts::TAU);
            let dist = rng.gen_range(0.15..0.4);
            let (dx, dy) = (dist * angle.cos(), dist * angle.sin());
            for it in choose_n(rng, &mut pool, 1) {
                let Item::Way(w) = it else { continue };
                let mut nodes = s.world.way(w).nodes.clone();
                nodes.sort_unstable();
                nodes.dedup();
                for x in nodes {
                    let node = s.world.node(x);
                    if node.refs != 1 || !s.free(Item::Node(x)) {
                        continue;
                    }
                    let p = P::from_e7(node.lat, node.lon).offset(dx, dy);
                    if !geo.is_land(p) {
                        continue;
                    }
                    m.undo.push(Undo::NodePos(x, node.lat, node.lon));
                    let (lat, lon) = p.to_e7();
                    s.modify_node(x, |n| {
                        n.lat = lat;
                        n.lon = lon;
                    })?;
                }
            }
            if s.changes == 0 {
                let p = geo.sample(area, rng);
                let t = vec![("amenity".to_owned(), "bench".to_owned())];
                s.create_node(p, t, Kind::Poi)?;
            }
        }
        Step::MistakeRevert { case } => {
            if let Some(m) = state.mistakes.get_mut(case) {
                undo(s, &m.undo)?;
            }
            if s.changes == 0 {
                // The mistake had nothing to undo; the author adds a note instead.
                let p = geo.sample(Area::Town, rng);
                let t = vec![("amenity".to_owned(), "bench".to_owned())];
                s.create_node(p, t, Kind::Poi)?;
            }
        }
    }
    Ok(())
}

fn undo(s: &mut Session<'_>, steps: &[Undo]) -> Result<(), DemoError> {
    for u in steps {
        match u {
            Undo::NodeTags(x, t) if s.world.node(*x).visible => {
                let t = t.clone();
                s.modify_node(*x, |n| n.tags = t)?;
            }
            Undo::WayTags(x, t) if s.world.way(*x).visible => {
                let t = t.clone();
                s.modify_way_tags(*x, |w| *w = t)?;
            }
            Undo::Recreate(p, t) => {
                s.create_node(*p, t.clone(), Kind::Poi)?;
            }
            Undo::NodePos(x, lat, lon) if s.world.node(*x).visible => {
                let (lat, lon) = (*lat, *lon);
                s.modify_node(*x, |n| {
                    n.lat = lat;
                    n.lon = lon;
                })?;
            }
            _ => {}
        }
    }
    Ok(())
}

/// Records a finished changeset of an earlier case.
pub(super) fn record(state: &mut State, step: Step, cs: i64) {
    match step {
        Step::Vandal { case } => {
            if let Some(c) = state.cases.get_mut(case) {
                c.changesets.push(cs);
            }
        }
        Step::Revert { case } => {
            if let Some(c) = state.cases.get_mut(case) {
                c.revert = Some(cs);
            }
        }
        Step::Mistake { case } => {
            if let Some(m) = state.mistakes.get_mut(case) {
                m.changeset = Some(cs);
            }
        }
        Step::MistakeRevert { case } => {
            if let Some(m) = state.mistakes.get_mut(case) {
                m.revert = Some(cs);
            }
        }
    }
}

/// The comment of a changeset of an earlier case (after [`record`] of the earlier steps).
pub(super) fn comment(state: &mut State, step: Step, rng: &mut ChaCha8Rng) -> Option<String> {
    match step {
        // Vandals rarely explain themselves; some leave a word.
        Step::Vandal { .. } => rng.gen_bool(0.3).then(|| "update".to_owned()),
        Step::Revert { case } => {
            let c = state.cases.get_mut(case)?;
            let (template, style) = VANDALISM_REVERTS[c.comment % VANDALISM_REVERTS.len()];
            c.revert_comment = write_ids(template, style, &c.changesets);
            Some(c.revert_comment.clone())
        }
        Step::Mistake { .. } => {
            Some(MISTAKE_COMMENTS[rng.gen_range(0..MISTAKE_COMMENTS.len())].to_owned())
        }
        Step::MistakeRevert { case } => {
            let m = state.mistakes.get_mut(case)?;
            let (template, style) = MISTAKE_REVERTS[m.comment % MISTAKE_REVERTS.len()];
            m.revert_comment = write_ids(
                template,
                style,
                &m.changeset.into_iter().collect::<Vec<_>>(),
            );
            Some(m.revert_comment.clone())
        }
    }
}

/// Whether the step's edits are damage that ordinary mappers leave alone until reverted.
pub(super) fn is_damage(step: Step) -> bool {
    matches!(step, Step::Vandal { .. })
}

/// The ground truth of the earlier cases, vandalism first, in plan order.
pub(super) fn finish(state: &State) -> Vec<EarlierCase> {
    let mut out: Vec<EarlierCase> = state
        .cases
        .iter()
        .filter_map(|c| {
            Some(EarlierCase {
                kind: c.damage.name().to_owned(),
                vandalism: true,
                changesets: c.changesets.clone(),
                reverted_by: c.revert?,
                revert_comment: c.revert_comment.clone(),
            })
        })
        .collect();
    out.extend(state.mistakes.iter().filter_map(|m| {
        Some(EarlierCase {
            kind: "accidental_move".to_owned(),
            vandalism: false,
            changesets: m.changeset.into_iter().collect(),
            reverted_by: m.revert?,
            revert_comment: m.revert_comment.clone(),
        })
    }));
    out
}
