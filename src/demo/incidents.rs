//! The four incidents injected into the report week, and their ground truth: a deletion burst in
//! central Quillhaven, a village fabricated in the open sea, a surge of brand-new accounts
//! spamming a village, and advertising text replacing main-street shop names.

use rand::Rng;
use rand_chacha::ChaCha8Rng;

use super::geography::{
    footprint, grid_y, jitter, Geo, MAIN_STREET, MAIN_STREET_ROW, P, TOWN_CENTRE, VILLAGES,
};
use super::names::{Names, EDITORS};
use super::people::{People, Role, DAY};
use super::sample::choose_n;
use super::world::{set_tag, tags, Item, Kind, Session, World};
use super::{timed, DemoError, Incident};

/// Kind names, as written to `incidents.json`.
pub(super) const DELETION_BURST: &str = "deletion_burst";
pub(super) const OFFSHORE_FABRICATION: &str = "offshore_fabrication";
pub(super) const NEWCOMER_SURGE: &str = "newcomer_surge";
pub(super) const RENAME_SPAM: &str = "rename_spam";

/// Where the deletion burst strikes: a residential part of the town centre, well away from the
/// main street.
const BURST_CENTRE: P = P::new(-5.55, -0.75);
/// Where the fabricated village is drawn: open sea south-east of the bay, far from the islet.
const FABRICATION_CENTRE: P = P::new(4.3, -4.1);
/// Name of the fabricated village.
const FABRICATED_NAME: &str = "Ostrevane";
/// The village the newcomer surge targets (index into [`VILLAGES`]).
const SURGE_VILLAGE: usize = 1;
/// The repeated text of the surge, with a fictional phone number (555-01xx is reserved for
/// fiction in the North American numbering plan; common practice, no source).
const SURGE_TEXT: &str = "Fast cash loans call +1 555 0142";
/// Advertising names of the rename spam, per account.
const SPAM_TEXTS: [[&str; 2]; 2] = [
    [
        "Best prices www.quickdeal-xyz.example",
        "Cheap deals www.quickdeal-xyz.example",
    ],
    [
        "Huge discounts at http://bargain-hub.example",
        "Order now http://bargain-hub.example",
    ],
];

/// What one incident changeset does.
#[derive(Debug, Clone, Copy)]
pub(super) enum Task {
    Burst { part: usize },
    Fabricate { part: usize },
    Surge,
    Spam { part: usize, account: usize },
}

/// An incident changeset with its time and account.
pub(super) struct Planned {
    pub created_at: i64,
    pub upload: i64,
    pub user: u32,
    pub task: Task,
    pub comment: Option<&'static str>,
    pub editor: &'static str,
}

/// Running ground truth of one incident.
#[derive(Default)]
struct Log {
    changesets: Vec<i64>,
    sum: (f64, f64, u32),
    edits: u32,
}

/// State the incidents keep between their changesets.
pub(super) struct State {
    burst_parts: Option<Vec<Vec<Item>>>,
    spam_parts: Option<Vec<Vec<u32>>>,
    fabricated_streets: Vec<f64>,
    logs: [Log; 4],
    burst_user: u32,
    burst_account_days: i64,
    surge_accounts: usize,
    spam_accounts: usize,
    fabrication_buildings: u32,
}

const BURST_PARTS: usize = 3;
const SPAM_PARTS: usize = 3;

/// Creates the incident accounts and plans their changesets in the week starting `monday`
/// (Unix seconds). Returns the plan, the state, and the burst account with its number of earlier
/// changesets (for the history).
pub(super) fn plan(
    rng: &mut ChaCha8Rng,
    people: &mut People,
    names: &mut Names,
    monday: i64,
    period_start: i64,
) -> (Vec<Planned>, State, (u32, u32)) {
    let mobile = EDITORS[3];
    let at = |day: i64, h: i64, m: i64| monday + day * DAY + h * 3600 + m * 60;
    let mut plans = Vec::new();

    // Rename spam: two new accounts, Tuesday and Wednesday.
    let spam_a = people.add(
        rng,
        names,
        Role::Incident,
        None,
        Some(mobile),
        at(1, 10, 12),
    );
    let spam_b = people.add(
        rng,
        names,
        Role::Incident,
        None,
        Some(EDITORS[4]),
        at(2, 14, 20),
    );
    for (part, (user, account, start, comment)) in [
        (spam_a, 0, at(1, 10, 12), Some("update shop names")),
        (spam_a, 0, at(1, 10, 51), None),
        (spam_b, 1, at(2, 14, 20), None),
    ]
    .into_iter()
    .enumerate()
    {
        let (created_at, upload) = timed(start, rng.gen_range(900..1500));
        plans.push(Planned {
            created_at,
            upload,
            user,
            task: Task::Spam { part, account },
            comment,
            editor: people.users[user as usize].editor,
        });
    }

    // Deletion burst: an older, quiet account, Wednesday evening.
    let account_days = rng.gen_range(420..650);
    let first = period_start - account_days * DAY;
    let burst = people.add(rng, names, Role::Incident, None, Some(EDITORS[0]), first);
    let earlier = rng.gen_range(3..=6);
    for (part, (h, m, comment)) in [
        (19, 5, None),
        (19, 48, Some("cleanup")),
        (20, 31, Some("minor fixes")),
    ]
    .into_iter()
    .enumerate()
    {
        let (created_at, upload) = timed(at(2, h, m), rng.gen_range(1200..1800));
        plans.push(Planned {
            created_at,
            upload,
            user: burst,
            task: Task::Burst { part },
            comment,
            editor: EDITORS[0],
        });
    }

    // Offshore fabrication: a fresh account, Thursday afternoon.
    let fab = people.add(
        rng,
        names,
        Role::Incident,
        None,
        Some(EDITORS[4]),
        at(3, 15, 10),
    );
    for (part, (h, m, comment)) in [(15, 10, "new village"), (16, 2, "added houses")]
        .into_iter()
        .enumerate()
    {
        let (created_at, upload) = timed(at(3, h, m), rng.gen_range(1500..2400));
        plans.push(Planned {
            created_at,
            upload,
            user: fab,
            task: Task::Fabricate { part },
            comment: Some(comment),
            editor: EDITORS[4],
        });
    }

    // Newcomer surge: 10-14 brand-new accounts from Friday afternoon to Saturday evening.
    let surge_n = rng.gen_range(10..=14);
    let mut t = at(4, 15, 30);
    for _ in 0..surge_n {
        let (created_at, upload) = timed(t, rng.gen_range(240..900));
        let user = people.add(rng, names, Role::Incident, None, Some(mobile), created_at);
        plans.push(Planned {
            created_at,
            upload,
            user,
            task: Task::Surge,
            comment: None,
            editor: mobile,
        });
        t += rng.gen_range(3600..8400);
    }

    let state = State {
        burst_parts: None,
        spam_parts: None,
        fabricated_streets: Vec::new(),
        logs: Default::default(),
        burst_user: burst,
        burst_account_days: account_days,
        surge_accounts: surge_n,
        spam_accounts: 2,
        fabrication_buildings: 0,
    };
    (plans, state, (burst, earlier))
}

fn log_index(task: Task) -> usize {
    match task {
        Task::Burst { .. } => 0,
        Task::Fabricate { .. } => 1,
        Task::Surge => 2,
        Task::Spam { .. } => 3,
    }
}

/// Objects the burst deletes, in parts from west to east, about 330-380 elements in all.
fn burst_targets(world: &World, rng: &mut ChaCha8Rng) -> Vec<Vec<Item>> {
    let deletable = |w: &World, it: Item| match it {
        Item::Way(x) => {
            let way = w.way(x);
            matches!(way.kind, Kind::Building | Kind::Path) && !way.in_rel && !way.incident
        }
        Item::Node(x) => {
            let n = w.node(x);
            n.kind == Kind::Poi && n.refs == 0 && !n.incident
        }
    };
    let cost = |it: Item| -> u32 {
        match it {
            Item::Node(_) => 1,
            Item::Way(x) => {
                let mut nodes = world.way(x).nodes.clone();
                nodes.sort_unstable();
                nodes.dedup();
                let orphans = nodes
                    .iter()
                    .filter(|&&n| world.node(n).refs == 1 && world.node(n).tags.is_empty())
                    .count();
                1 + u32::try_from(orphans).unwrap_or(0)
            }
        }
    };
    let mut all = world.near(
        BURST_CENTRE,
        0.4,
        &[Kind::Building, Kind::Path, Kind::Poi],
        deletable,
    );
    let d = |it: Item| world.item_p(it).dist(BURST_CENTRE);
    all.sort_by(|&a, &b| d(a).total_cmp(&d(b)));
    // Footpaths and points first (within 300 m), then the nearest buildings to fill up.
    let (mut first, rest): (Vec<Item>, Vec<Item>) = all.into_iter().partition(|&it| {
        let building = matches!(it, Item::Way(x) if world.way(x).kind == Kind::Building);
        !building && d(it) < 0.3
    });
    let target = rng.gen_range(330..=380);
    let mut chosen = Vec::new();
    let mut total = 0;
    for it in first.drain(..).chain(rest) {
        if total >= target {
            break;
        }
        total += cost(it);
        chosen.push(it);
    }
    chosen.sort_by(|&a, &b| world.item_p(a).x.total_cmp(&world.item_p(b).x));
    let per = chosen.len().div_ceil(BURST_PARTS).max(1);
    chosen.chunks(per).map(<[Item]>::to_vec).collect()
}

/// Main-street shops the spam renames, nearest a random point of the street, split by changeset.
fn spam_targets(world: &World, rng: &mut ChaCha8Rng) -> Result<Vec<Vec<u32>>, DemoError> {
    let cx = rng.gen_range(-5.0..-4.7);
    let at = P::new(cx, grid_y(MAIN_STREET_ROW));
    let mut shops: Vec<u32> = world
        .near(at, 1.0, &[Kind::Shop], |w, it| match it {
            Item::Node(x) => w.node(x).kind == Kind::Shop && !w.node(x).incident,
            Item::Way(_) => false,
        })
        .into_iter()
        .filter_map(|it| match it {
            Item::Node(x) => Some(x),
            Item::Way(_) => None,
        })
        .collect();
    let d = |x: u32| (world.node_p(x).x - cx).abs();
    shops.sort_by(|&a, &b| d(a).total_cmp(&d(b)));
    let n = rng.gen_range(26..=34);
    if shops.len() < n {
        return Err(DemoError::Scenario(format!(
            "only {} shops left on {MAIN_STREET} for the rename spam",
            shops.len()
        )));
    }
    shops.truncate(n);
    let first = n * 2 / 5;
    let second = n * 3 / 10;
    Ok(vec![
        shops[..first].to_vec(),
        shops[first..first + second].to_vec(),
        shops[first + second..].to_vec(),
    ])
}

/// Runs one incident changeset in `s`.
pub(super) fn run(
    task: Task,
    s: &mut Session<'_>,
    rng: &mut ChaCha8Rng,
    geo: &Geo,
    names: &mut Names,
    state: &mut State,
) -> Result<(), DemoError> {
    match task {
        Task::Burst { part } => {
            if state.burst_parts.is_none() {
                state.burst_parts = Some(burst_targets(s.world, rng));
            }
            let items = state
                .burst_parts
                .as_ref()
                .and_then(|p| p.get(part))
                .cloned()
                .unwrap_or_default();
            for it in items {
                match it {
                    Item::Way(w) if s.world.way(w).visible => {
                        s.delete_way(w)?;
                    }
                    Item::Node(x) if s.world.node(x).visible => s.delete_node(x)?,
                    _ => {}
                }
            }
        }
        Task::Spam { part, account } => {
            if state.spam_parts.is_none() {
                state.spam_parts = Some(spam_targets(s.world, rng)?);
            }
            let shops = state
                .spam_parts
                .as_ref()
                .and_then(|p| p.get(part))
                .cloned()
                .unwrap_or_default();
            let texts = SPAM_TEXTS[account.min(1)];
            for (k, x) in shops.into_iter().enumerate() {
                if s.world.node(x).visible {
                    let text = texts[k % 2];
                    s.modify_node(x, |n| set_tag(&mut n.tags, "name", text))?;
                }
            }
        }
        Task::Fabricate { part: 0 } => {
            let c = FABRICATION_CENTRE;
            s.create_node(
                c.offset(0.02, 0.03),
                tags(&[("place", "village"), ("name", FABRICATED_NAME)]),
                Kind::Place,
            )?;
            for k in -1i32..=1 {
                let y = c.y + 0.15 * f64::from(k);
                let mut nodes = Vec::new();
                for i in -3i32..=3 {
                    let p = jitter(P::new(c.x + 0.1 * f64::from(i), y), 0.004, rng);
                    nodes.push(s.create_node(p, Vec::new(), Kind::Vertex)?);
                }
                let name = names.street(rng);
                s.create_way(
                    nodes,
                    tags(&[("highway", "residential"), ("name", &name)]),
                    Kind::Street,
                )?;
                state.fabricated_streets.push(y);
            }
        }
        Task::Fabricate { .. } => {
            let c = FABRICATION_CENTRE;
            let mut slots = Vec::new();
            for &y in &state.fabricated_streets {
                for i in -5i32..=5 {
                    for side in [-1.0, 1.0] {
                        slots.push(P::new(c.x + 0.05 * f64::from(i), y + 0.03 * side));
                    }
                }
            }
            let n = rng.gen_range(15..=25);
            for p in choose_n(rng, &mut slots, n) {
                let corners = footprint(jitter(p, 0.004, rng), (1.0, 0.0), 0.012, 0.01, false);
                let kind = if rng.gen_bool(0.7) { "house" } else { "yes" };
                s.create_area(&corners, tags(&[("building", kind)]), Kind::Building)?;
                state.fabrication_buildings += 1;
            }
        }
        Task::Surge => {
            let Some(v) = VILLAGES.get(SURGE_VILLAGE) else {
                return Ok(());
            };
            for _ in 0..rng.gen_range(3..=5) {
                let p = jitter(v.centre, 0.25, rng);
                if geo.is_land(p) {
                    s.create_node(p, tags(&[("shop", "yes"), ("name", SURGE_TEXT)]), Kind::Poi)?;
                }
            }
            // Deletions hit stand-alone points when there are any, so the surge stays a surge
            // of new accounts and does not also look like a deletion burst.
            let pick = |s: &Session<'_>, rng: &mut ChaCha8Rng, points_only: bool| {
                let mut c =
                    s.world.near(
                        v.centre,
                        0.5,
                        &[Kind::Poi, Kind::Building],
                        |w, it| match it {
                            Item::Node(x) => w.node(x).kind == Kind::Poi && w.node(x).refs == 0,
                            Item::Way(x) => w.way(x).kind == Kind::Building && !w.way(x).in_rel,
                        },
                    );
                c.retain(|&it| s.free(it));
                if points_only && c.iter().any(|it| matches!(it, Item::Node(_))) {
                    c.retain(|it| matches!(it, Item::Node(_)));
                }
                choose_n(rng, &mut c, 1).first().copied()
            };
            match pick(s, rng, true) {
                Some(Item::Way(w)) => {
                    s.delete_way(w)?;
                }
                Some(Item::Node(x)) => s.delete_node(x)?,
                None => {}
            }
            match pick(s, rng, false) {
                Some(Item::Way(w)) => s.modify_way_tags(w, |t| set_tag(t, "name", SURGE_TEXT))?,
                Some(Item::Node(x)) => {
                    s.modify_node(x, |n| set_tag(&mut n.tags, "name", SURGE_TEXT))?
                }
                None => {}
            }
        }
    }
    Ok(())
}

/// Records a finished incident changeset.
pub(super) fn record(state: &mut State, task: Task, cs: i64, s: &Session<'_>) {
    let log = &mut state.logs[log_index(task)];
    log.changesets.push(cs);
    log.sum.0 += s.centre.0;
    log.sum.1 += s.centre.1;
    log.sum.2 += s.centre.2;
    log.edits += s.changes;
}

/// The ground truth, in the fixed order of the four kinds.
pub(super) fn finish(state: &State, people: &People, geo: &Geo) -> Vec<Incident> {
    let burst_user = people
        .users
        .get(state.burst_user as usize)
        .map_or("?", |u| u.name.as_str());
    let descriptions = [
        (
            DELETION_BURST,
            format!(
                "Account {burst_user} (about {} days old, a few earlier changesets) deleted {} \
                 objects (buildings with their nodes, footpaths, shops) in central Quillhaven in \
                 {BURST_PARTS} changesets with empty or vague comments.",
                state.burst_account_days, state.logs[0].edits
            ),
        ),
        (
            OFFSHORE_FABRICATION,
            format!(
                "A new account drew a village named {FABRICATED_NAME} with {} buildings and 3 \
                 streets in open sea about {:.1} km off the coast.",
                state.fabrication_buildings,
                geo.distance_to_land_km(FABRICATION_CENTRE)
                    .unwrap_or(f64::NAN)
            ),
        ),
        (
            NEWCOMER_SURGE,
            format!(
                "{} brand-new accounts made their first changesets within two days in {}, adding \
                 points named \"{SURGE_TEXT}\" and deleting or renaming existing objects, without \
                 comments.",
                state.surge_accounts,
                VILLAGES.get(SURGE_VILLAGE).map_or("", |v| v.name)
            ),
        ),
        (
            RENAME_SPAM,
            format!(
                "{} new accounts replaced the names of {} shops on {MAIN_STREET} in Quillhaven \
                 with advertising text containing web addresses, in {SPAM_PARTS} changesets.",
                state.spam_accounts, state.logs[3].edits
            ),
        ),
    ];
    descriptions
        .into_iter()
        .zip(&state.logs)
        .map(|((kind, description), log)| {
            let (x, y, n) = log.sum;
            let centre = if n > 0 {
                P::new(x / f64::from(n), y / f64::from(n))
            } else {
                TOWN_CENTRE
            };
            let (lat, lon) = centre.to_e7();
            Incident {
                kind: kind.to_owned(),
                lat: f64::from(lat) / 1e7,
                lon: f64::from(lon) / 1e7,
                changesets: log.changesets.clone(),
                description,
            }
        })
        .collect()
}
