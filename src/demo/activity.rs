//! Ordinary mapping: what one everyday changeset does. Each changeset works around one focus
//! point of its area: adding buildings, shops, paths, fields or buoys, adding and fixing tags,
//! renaming businesses, nudging geometry, refining roads, and now and then removing a demolished
//! building or a duplicate point (a few percent of all edits, spread thinly).

use rand::Rng;
use rand_chacha::ChaCha8Rng;

use super::geography::{footprint, jitter, Area, Geo, P};
use super::names::{self, Names};
use super::sample::{choose_n, lognormal_count, weighted};
use super::snapshot::{building_tags, landuse_tags, poi_tags, seamark_tags, walk, OPENING_HOURS};
use super::world::{set_tag, tag, Item, Kind, Session, Tags};
use super::DemoError;

/// The kinds of everyday work.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(super) enum Activity {
    Buildings,
    Pois,
    Tags,
    Names,
    Move,
    Paths,
    Landuse,
    Seamarks,
    RoadDetail,
    Cleanup,
}

/// One planned ordinary changeset.
#[derive(Debug, Clone, Copy)]
pub(super) struct Ordinary {
    pub area: Area,
    pub activity: Activity,
    /// How much work: buildings, points, tagged objects ... depending on the activity.
    pub units: u32,
}

impl Activity {
    /// Draws the kind of work for a changeset in `area`; newcomers stick to simple work.
    pub fn pick(rng: &mut ChaCha8Rng, area: Area, newcomer: bool) -> Self {
        use Activity as A;
        if newcomer {
            let table = [
                (A::Buildings, 3.0),
                (A::Pois, 3.0),
                (A::Tags, 3.0),
                (A::Names, 1.0),
            ];
            return weighted(rng, &table).unwrap_or(A::Pois);
        }
        let table: &[(Self, f64)] = match area {
            Area::TownCentre => &[
                (A::Buildings, 14.0),
                (A::Pois, 18.0),
                (A::Tags, 25.0),
                (A::Names, 3.0),
                (A::Move, 12.0),
                (A::Paths, 7.0),
                (A::RoadDetail, 6.0),
                (A::Cleanup, 10.0),
            ],
            Area::Town | Area::Village(_) => &[
                (A::Buildings, 34.0),
                (A::Pois, 10.0),
                (A::Tags, 20.0),
                (A::Names, 1.0),
                (A::Move, 11.0),
                (A::Paths, 9.0),
                (A::RoadDetail, 8.0),
                (A::Cleanup, 9.0),
            ],
            Area::Harbour => &[
                (A::Seamarks, 40.0),
                (A::Pois, 20.0),
                (A::Tags, 25.0),
                (A::Buildings, 10.0),
            ],
            Area::Countryside => &[
                (A::Buildings, 15.0),
                (A::Landuse, 35.0),
                (A::Paths, 20.0),
                (A::Tags, 15.0),
                (A::Move, 8.0),
                (A::RoadDetail, 7.0),
            ],
        };
        weighted(rng, table).unwrap_or(A::Tags)
    }

    /// How much work a changeset of this kind does.
    pub fn units(self, rng: &mut ChaCha8Rng, newcomer: bool) -> u32 {
        let n = match self {
            Self::Buildings => lognormal_count(rng, 5.0, 0.9, 1, 24),
            Self::Pois => lognormal_count(rng, 2.0, 0.7, 1, 8),
            Self::Tags => lognormal_count(rng, 6.0, 1.0, 1, 60),
            Self::Names => rng.gen_range(1..=2),
            Self::Paths | Self::Seamarks => rng.gen_range(1..=4),
            Self::Move => lognormal_count(rng, 3.0, 0.8, 1, 12),
            Self::Landuse => lognormal_count(rng, 2.0, 0.6, 1, 5),
            Self::RoadDetail => lognormal_count(rng, 4.0, 0.8, 1, 15),
            Self::Cleanup => rng.gen_range(1..=2),
        };
        if newcomer {
            n.min(3)
        } else {
            n
        }
    }

    /// A plain comment describing the work.
    pub fn comment(self, rng: &mut ChaCha8Rng, area: Area) -> String {
        let templates: &[&str] = match self {
            Self::Buildings => &[
                "add buildings in {place}",
                "buildings from survey in {place}",
                "map houses in {place}",
                "more buildings around {place}",
            ],
            Self::Pois => &[
                "add shops and amenities in {place}",
                "add benches and post boxes in {place}",
                "new points of interest in {place}",
            ],
            Self::Tags => &[
                "add opening hours in {place}",
                "add building levels in {place}",
                "add surface and lighting to streets in {place}",
                "tag fixes in {place}",
            ],
            Self::Names => &[
                "update shop names in {place}",
                "fix names in {place}",
                "shop changed owner in {place}",
            ],
            Self::Move => &[
                "align buildings with imagery in {place}",
                "fix geometry in {place}",
                "move nodes to match survey",
            ],
            Self::Paths => &[
                "add footpaths in {place}",
                "add tracks around {place}",
                "paths from gps traces around {place}",
            ],
            Self::Landuse => &[
                "add farmland around {place}",
                "map fields and woods in {place}",
            ],
            Self::Seamarks => &["add buoys near {place}", "update seamarks near {place}"],
            Self::RoadDetail => &[
                "improve road geometry in {place}",
                "refine streets in {place}",
            ],
            Self::Cleanup => &[
                "remove demolished buildings in {place}",
                "remove duplicate point in {place}",
                "clean up old objects in {place}",
            ],
        };
        names::comment(rng, templates, area.label())
    }
}

/// The work of one ordinary changeset.
pub(super) struct Work<'a, 'b> {
    pub s: &'a mut Session<'b>,
    pub rng: &'a mut ChaCha8Rng,
    pub geo: &'a Geo,
    pub names: &'a mut Names,
}

fn kind_of(s: &Session<'_>, it: Item) -> Kind {
    match it {
        Item::Node(n) => s.world.node(n).kind,
        Item::Way(w) => s.world.way(w).kind,
    }
}

impl Work<'_, '_> {
    /// Runs the planned work; a changeset that finds nothing to do adds one building instead,
    /// so every ordinary changeset has edits.
    pub fn run(&mut self, o: &Ordinary) -> Result<(), DemoError> {
        let focus = self.geo.sample(o.area, self.rng);
        let r = o.area.spread();
        let n = o.units as usize;
        match o.activity {
            Activity::Buildings => {
                self.buildings(o.area, focus, n)?;
                if self.rng.gen_bool(0.12) {
                    self.delete(focus, r, &[Kind::Building], 1)?;
                }
                if self.rng.gen_bool(0.3) {
                    let k = self.rng.gen_range(1..=3);
                    self.retag(focus, r, &[Kind::Building], k)?;
                }
            }
            Activity::Pois => {
                self.pois(o.area, focus, n)?;
                if self.rng.gen_bool(0.3) {
                    self.delete(focus, r, &[Kind::Poi], 1)?;
                }
            }
            Activity::Tags => {
                let kinds = [
                    Kind::Building,
                    Kind::Poi,
                    Kind::Shop,
                    Kind::Street,
                    Kind::Path,
                    Kind::Landuse,
                ];
                self.retag(focus, r.max(0.2), &kinds, n)?;
                if self.rng.gen_bool(0.2) {
                    self.delete(focus, r.max(0.2), &[Kind::Poi], 1)?;
                }
            }
            Activity::Names => self.rename(focus, r.max(0.3), n)?,
            Activity::Move => self.nudge(focus, r.max(0.2), n)?,
            Activity::Paths => self.paths(o.area, focus, n)?,
            Activity::Landuse => self.landuse(focus, r, n)?,
            Activity::Seamarks => {
                self.seamarks(focus, n)?;
                let k = self.rng.gen_range(0..=2);
                self.retag(focus, 1.5, &[Kind::Seamark], k)?;
            }
            Activity::RoadDetail => self.road_detail(focus, r.max(0.2), n)?,
            Activity::Cleanup => {
                for _ in 0..n {
                    // Mostly single points: ordinary deletions stay small and spread out.
                    let kinds: &[Kind] = match self.rng.gen_range(0..20) {
                        0..=10 => &[Kind::Poi],
                        11..=17 => &[Kind::Building],
                        _ => &[Kind::Path],
                    };
                    self.delete(focus, r.max(0.2), kinds, 1)?;
                }
                let k = self.rng.gen_range(0..=3);
                self.retag(focus, r.max(0.2), &[Kind::Building, Kind::Poi], k)?;
            }
        }
        if self.s.changes == 0 {
            self.buildings(o.area, focus, 1)?;
        }
        if self.s.changes == 0 {
            let p = self.geo.sample(o.area, self.rng);
            let t = poi_tags(self.rng, self.names, o.area);
            self.s.create_node(p, t, Kind::Poi)?;
        }
        Ok(())
    }

    /// Free items of the given kinds within `r` km of `focus`.
    fn candidates(&self, focus: P, r: f64, kinds: &[Kind]) -> Vec<Item> {
        self.s
            .world
            .near(focus, r, kinds, |w, it| match it {
                Item::Node(n) => kinds.contains(&w.node(n).kind) && w.node(n).refs == 0,
                Item::Way(x) => kinds.contains(&w.way(x).kind),
            })
            .into_iter()
            .filter(|&it| self.s.free(it))
            .collect()
    }

    fn buildings(&mut self, area: Area, focus: P, n: usize) -> Result<(), DemoError> {
        let u = if self.rng.gen_bool(0.5) {
            (1.0, 0.0)
        } else {
            (0.0, 1.0)
        };
        let v = (-u.1, u.0);
        let spacing = self.rng.gen_range(0.016..0.03);
        for k in 0..n {
            let (a, row) = ((k % 8) as f64 * spacing, (k / 8) as f64 * 0.03);
            let c = focus.offset(u.0 * a + v.0 * row, u.1 * a + v.1 * row);
            let c = jitter(c, 0.003, self.rng);
            let w = self.rng.gen_range(0.007..0.014);
            let d = self.rng.gen_range(0.007..0.015);
            let corners = footprint(c, u, w, d, self.rng.gen_bool(0.2));
            if !self.geo.all_land(&corners) {
                continue;
            }
            let t = building_tags(self.rng, area);
            self.s.create_area(&corners, t, Kind::Building)?;
        }
        Ok(())
    }

    fn pois(&mut self, area: Area, focus: P, n: usize) -> Result<(), DemoError> {
        for _ in 0..n {
            let p = jitter(focus, area.spread(), self.rng);
            if !self.geo.is_land(p) {
                continue;
            }
            let t = poi_tags(self.rng, self.names, area);
            self.s.create_node(p, t, Kind::Poi)?;
        }
        Ok(())
    }

    /// Deletes up to `n` nearby objects (ways with their orphaned nodes); relation members
    /// and vertices are never candidates.
    fn delete(&mut self, focus: P, r: f64, kinds: &[Kind], n: usize) -> Result<(), DemoError> {
        let deletable = |it: &Item| match *it {
            Item::Way(w) => !self.s.world.way(w).in_rel,
            Item::Node(_) => true,
        };
        let mut c: Vec<Item> = self.candidates(focus, r, kinds);
        c.retain(deletable);
        if c.is_empty() {
            // Sparse places (villages, early weeks) look further, so the deletion rate does not
            // grow as the map fills up.
            c = self.candidates(focus, 0.6, kinds);
            c.retain(deletable);
        }
        for it in choose_n(self.rng, &mut c, n) {
            match it {
                Item::Way(w) => {
                    self.s.delete_way(w)?;
                }
                Item::Node(x) => self.s.delete_node(x)?,
            }
        }
        Ok(())
    }

    fn retag(&mut self, focus: P, r: f64, kinds: &[Kind], n: usize) -> Result<(), DemoError> {
        let mut c = self.candidates(focus, r, kinds);
        for it in choose_n(self.rng, &mut c, n) {
            let kind = kind_of(self.s, it);
            let rng = &mut *self.rng;
            match it {
                Item::Node(x) => self
                    .s
                    .modify_node(x, |node| improve(rng, kind, &mut node.tags))?,
                Item::Way(w) => self.s.modify_way_tags(w, |t| improve(rng, kind, t))?,
            }
        }
        Ok(())
    }

    fn rename(&mut self, focus: P, r: f64, n: usize) -> Result<(), DemoError> {
        let mut c: Vec<Item> = self
            .candidates(focus, r, &[Kind::Poi, Kind::Shop])
            .into_iter()
            .filter(|&it| match it {
                Item::Node(x) => tag(&self.s.world.node(x).tags, "name").is_some(),
                Item::Way(_) => false,
            })
            .collect();
        for it in choose_n(self.rng, &mut c, n) {
            let Item::Node(x) = it else { continue };
            let t = &self.s.world.node(x).tags;
            let what = tag(t, "shop")
                .or_else(|| tag(t, "amenity"))
                .unwrap_or("shop")
                .to_owned();
            let name = self.names.business(self.rng, &what);
            self.s
                .modify_node(x, |node| set_tag(&mut node.tags, "name", &name))?;
        }
        Ok(())
    }

    /// Moves a few ways' nodes by a metre or three (a building as a whole, a street locally).
    fn nudge(&mut self, focus: P, r: f64, n: usize) -> Result<(), DemoError> {
        let mut c = self.candidates(focus, r, &[Kind::Building, Kind::Path, Kind::Street]);
        for it in choose_n(self.rng, &mut c, n) {
            let Item::Way(w) = it else { continue };
            let way = self.s.world.way(w);
            let mut nodes = way.nodes.clone();
            if way.kind != Kind::Building && nodes.len() > 2 {
                let start = self.rng.gen_range(1..nodes.len() - 1);
                let len = self.rng.gen_range(1..=3).min(nodes.len() - 1 - start);
                nodes = nodes[start..start + len].to_vec();
            }
            nodes.sort_unstable();
            nodes.dedup();
            let dx = self.rng.gen_range(-0.003..0.003);
            let dy = self.rng.gen_range(-0.003..0.003);
            for x in nodes {
                if !self.s.free(Item::Node(x)) {
                    continue;
                }
                let p = self.s.world.node_p(x).offset(dx, dy);
                if !self.geo.is_land(p) {
                    continue;
                }
                let (lat, lon) = p.to_e7();
                self.s.modify_node(x, |node| {
                    node.lat = lat;
                    node.lon = lon;
                })?;
            }
        }
        Ok(())
    }

    fn paths(&mut self, area: Area, focus: P, n: usize) -> Result<(), DemoError> {
        let streets = self
            .s
            .world
            .near(focus, 0.3, &[Kind::Street], |w, it| match it {
                Item::Way(x) => w.way(x).kind == Kind::Street,
                Item::Node(_) => false,
            });
        let (highway, step) = match area {
            Area::Countryside => ("track", (0.06, 0.12)),
            Area::Village(_) => ("path", (0.03, 0.06)),
            _ => ("footway", (0.02, 0.045)),
        };
        for _ in 0..n {
            let start = match streets.get(self.rng.gen_range(0..streets.len().max(1))) {
                Some(&Item::Way(w)) => {
                    let nodes = &self.s.world.way(w).nodes;
                    nodes
                        .get(self.rng.gen_range(0..nodes.len().max(1)))
                        .copied()
                }
                _ => None,
            };
            let from = start.map_or(focus, |x| self.s.world.node_p(x));
            let len = self.rng.gen_range(2..=8);
            let Some(points) = walk(self.geo, self.rng, from, len, step) else {
                continue;
            };
            let mut nodes: Vec<u32> = start.into_iter().collect();
            for p in points {
                nodes.push(self.s.create_node(p, Vec::new(), Kind::Vertex)?);
            }
            let mut t: Tags = vec![("highway".to_owned(), highway.to_owned())];
            if self.rng.gen_bool(0.3) {
                let surface = if highway == "footway" {
                    "paved"
                } else {
                    "gravel"
                };
                t.push(("surface".to_owned(), surface.to_owned()));
            }
            self.s.create_way(nodes, t, Kind::Path)?;
        }
        Ok(())
    }

    fn landuse(&mut self, focus: P, r: f64, n: usize) -> Result<(), DemoError> {
        for _ in 0..n {
            let c = jitter(focus, r, self.rng);
            let radius = self.rng.gen_range(0.08..0.25);
            let k = self.rng.gen_range(5..=8);
            let corners: Vec<P> = (0..k)
                .map(|i| {
                    let a = std::f64::consts::TAU * f64::from(i) / f64::from(k)
                        + self.rng.gen_range(-0.2..0.2);
                    let rr = radius * self.rng.gen_range(0.7..1.1);
                    P::new(c.x + rr * a.cos(), c.y + rr * a.sin())
                })
                .collect();
            if !self.geo.all_land(&corners) {
                continue;
            }
            let t = landuse_tags(self.rng);
            self.s.create_area(&corners, t, Kind::Landuse)?;
        }
        Ok(())
    }

    fn seamarks(&mut self, focus: P, n: usize) -> Result<(), DemoError> {
        for _ in 0..n {
            let near = if self.rng.gen_bool(0.7) {
                focus
            } else {
                P::new(1.6, self.rng.gen_range(-5.0..4.0))
            };
            let Some(p) = self.geo.sample_water(near, self.rng) else {
                continue;
            };
            let t = seamark_tags(self.rng);
            self.s.create_node(p, t, Kind::Seamark)?;
        }
        Ok(())
    }

    /// Adds a vertex in the middle of one segment of each of a few streets or paths.
    fn road_detail(&mut self, focus: P, r: f64, n: usize) -> Result<(), DemoError> {
        let mut c = self.candidates(focus, r, &[Kind::Street, Kind::Path]);
        for it in choose_n(self.rng, &mut c, n) {
            let Item::Way(w) = it else { continue };
            let nodes = &self.s.world.way(w).nodes;
            if nodes.len() < 2 {
                continue;
            }
            let at = self.rng.gen_range(0..nodes.len() - 1);
            let (a, b) = (
                self.s.world.node_p(nodes[at]),
                self.s.world.node_p(nodes[at + 1]),
            );
            let off = self.rng.gen_range(-0.004..0.004);
            let len = a.dist(b).max(1e-9);
            let p = P::new(
                (a.x + b.x) / 2.0 - (b.y - a.y) / len * off,
                (a.y + b.y) / 2.0 + (b.x - a.x) / len * off,
            );
            if !self.geo.is_land(p) {
                continue;
            }
            let x = self.s.create_node(p, Vec::new(), Kind::Vertex)?;
            self.s.insert_way_node(w, at, x)?;
        }
        Ok(())
    }
}

/// A tag improvement that really changes something (a few tries, then whatever the last was).
fn improve(rng: &mut ChaCha8Rng, kind: Kind, t: &mut Tags) {
    for _ in 0..5 {
        let before = t.clone();
        tag_change(rng, kind, t);
        if *t != before {
            return;
        }
    }
}

/// One plausible tag improvement for an object of `kind`.
fn tag_change(rng: &mut ChaCha8Rng, kind: Kind, t: &mut Tags) {
    fn one<'a>(rng: &mut ChaCha8Rng, xs: &[&'a str]) -> &'a str {
        xs[rng.gen_range(0..xs.len())]
    }
    match kind {
        Kind::Building => match rng.gen_range(0..3) {
            0 => set_tag(t, "building:levels", &rng.gen_range(1..=5).to_string()),
            1 => set_tag(t, "roof:shape", one(rng, &["gabled", "hipped", "flat"])),
            _ => set_tag(t, "addr:housenumber", &rng.gen_range(1..200).to_string()),
        },
        Kind::Poi | Kind::Shop | Kind::Place => match rng.gen_range(0..3) {
            0 => set_tag(t, "opening_hours", one(rng, &OPENING_HOURS)),
            1 => set_tag(t, "wheelchair", one(rng, &["yes", "no", "limited"])),
            _ => set_tag(t, "level", "0"),
        },
        Kind::Street => match rng.gen_range(0..3) {
            0 => set_tag(
                t,
                "surface",
                one(rng, &["asphalt", "paving_stones", "sett"]),
            ),
            1 => set_tag(t, "lit", "yes"),
            _ => set_tag(t, "maxspeed", one(rng, &["30", "50"])),
        },
        Kind::Path => match rng.gen_range(0..2) {
            0 => set_tag(t, "surface", one(rng, &["gravel", "paved", "ground"])),
            _ => set_tag(t, "lit", one(rng, &["yes", "no"])),
        },
        Kind::Landuse => {
            if tag(t, "landuse") == Some("farmland") {
                set_tag(t, "crop", one(rng, &["wheat", "barley", "potato"]));
            } else {
                set_tag(t, "leaf_type", one(rng, &["broadleaved", "mixed"]));
            }
        }
        Kind::Seamark => set_tag(
            t,
            "seamark:light:colour",
            one(rng, &["red", "green", "white"]),
        ),
        Kind::Vertex | Kind::Outline => set_tag(t, "note", "checked on survey"),
    }
}
