//! The map at the start of the diff period: Quillhaven's street grid, buildings, main-street
//! shops, footpaths and harbour; four villages with their roads; farmland, woods and farms; buoys
//! and lights in the water; an islet; two wooded multipolygons and two bus routes. Every element
//! is attributed to an earlier changeset of the mapper history, whose box it extends.

use std::f64::consts::TAU;

use rand::seq::SliceRandom;
use rand::Rng;
use rand_chacha::ChaCha8Rng;

use super::geography::{
    footprint, grid_x, grid_y, jitter, Area, Geo, GRID_BLOCKS_X, GRID_BLOCKS_Y, HARBOUR, ISLAND,
    ISLAND_NAME, MAIN_STREET, MAIN_STREET_ROW, P, SHOP_SPAN, TOWN_CENTRE, TOWN_NAME, VILLAGES,
};
use super::names::Names;
use super::world::{tags, Bbox, ChangesetMeta, Kind, Meta, Tags, World};

/// Main-street shop kinds: (key, value).
pub(super) const SHOP_KINDS: [(&str, &str); 16] = [
    ("shop", "bakery"),
    ("shop", "clothes"),
    ("shop", "books"),
    ("shop", "hardware"),
    ("shop", "butcher"),
    ("shop", "florist"),
    ("shop", "convenience"),
    ("shop", "hairdresser"),
    ("shop", "gift"),
    ("shop", "seafood"),
    ("amenity", "cafe"),
    ("amenity", "cafe"),
    ("amenity", "restaurant"),
    ("amenity", "pub"),
    ("amenity", "pharmacy"),
    ("amenity", "bank"),
];

/// Opening-hours values used by the scenario.
pub(super) const OPENING_HOURS: [&str; 5] = [
    "Mo-Sa 09:00-18:00",
    "Mo-Fr 08:00-17:30; Sa 09:00-13:00",
    "Tu-Su 11:00-22:00",
    "Mo-Su 07:00-19:00",
    "Mo-Fr 09:00-16:00",
];

/// Creates snapshot elements, attributing each feature to a history changeset of its area.
pub(super) struct Builder<'a> {
    pub world: &'a mut World,
    pub rng: &'a mut ChaCha8Rng,
    pub geo: &'a Geo,
    pub names: &'a mut Names,
    hist: &'a mut [(ChangesetMeta, Area)],
    by_area: Vec<Vec<usize>>,
    cur: usize,
}

impl<'a> Builder<'a> {
    pub fn new(
        world: &'a mut World,
        rng: &'a mut ChaCha8Rng,
        geo: &'a Geo,
        names: &'a mut Names,
        hist: &'a mut [(ChangesetMeta, Area)],
    ) -> Self {
        let mut by_area = vec![Vec::new(); Area::COUNT];
        for (k, (_, area)) in hist.iter().enumerate() {
            by_area[area.index()].push(k);
        }
        Self {
            world,
            rng,
            geo,
            names,
            hist,
            by_area,
            cur: 0,
        }
    }

    /// Starts a feature: later elements belong to a history changeset made in `area`.
    fn begin(&mut self, area: Area) {
        let bucket = &self.by_area[area.index()];
        self.cur = match bucket.choose(self.rng) {
            Some(&k) => k,
            None => self.rng.gen_range(0..self.hist.len().max(1)),
        };
    }

    fn meta(&mut self, lat: i32, lon: i32) -> Meta {
        let version = match self.rng.gen_range(0..100) {
            0..=49 => 1,
            50..=69 => 2,
            70..=81 => 3,
            _ => self.rng.gen_range(4..=8),
        };
        match self.hist.get_mut(self.cur) {
            Some((cs, _)) => {
                Bbox::extend(&mut cs.bbox, lat, lon);
                cs.num_changes += 1;
                Meta {
                    version,
                    ts: cs.closed_at - 1,
                    cs: cs.id,
                    user: cs.user,
                }
            }
            None => Meta {
                version,
                ts: 0,
                cs: 0,
                user: 0,
            },
        }
    }

    fn node(&mut self, p: P, t: Tags, kind: Kind) -> u32 {
        let (lat, lon) = p.to_e7();
        let meta = self.meta(lat, lon);
        self.world.add_node(p, t, kind, meta)
    }

    fn way(&mut self, nodes: Vec<u32>, t: Tags, kind: Kind) -> u32 {
        let p = match nodes.first() {
            Some(&n) => self.world.node_p(n),
            None => TOWN_CENTRE,
        };
        let (lat, lon) = p.to_e7();
        let meta = self.meta(lat, lon);
        self.world.add_way(nodes, t, kind, meta)
    }

    fn area_way(&mut self, corners: &[P], t: Tags, kind: Kind) -> u32 {
        let mut nodes: Vec<u32> = corners
            .iter()
            .map(|&c| self.node(c, Vec::new(), Kind::Vertex))
            .collect();
        if let Some(&first) = nodes.first() {
            nodes.push(first);
        }
        self.way(nodes, t, kind)
    }

    /// A building of random size facing along `u`, if all of it is on land.
    fn building(&mut self, c: P, u: (f64, f64), t: Tags) -> Option<u32> {
        let w = self.rng.gen_range(0.008..0.015);
        let d = self.rng.gen_range(0.008..0.016);
        let cut = self.rng.gen_bool(0.2);
        let corners = footprint(c, u, w, d, cut);
        self.geo
            .all_land(&corners)
            .then(|| self.area_way(&corners, t, Kind::Building))
    }
}

/// Tags for an ordinary building in an area.
pub(super) fn building_tags(rng: &mut ChaCha8Rng, area: Area) -> Tags {
    let kinds: &[&str] = match area {
        Area::TownCentre => &["yes", "apartments", "retail", "yes", "commercial", "house"],
        Area::Town | Area::Harbour => {
            &["house", "yes", "residential", "house", "garage", "detached"]
        }
        Area::Village(_) => &["house", "yes", "house", "farm_auxiliary", "shed"],
        Area::Countryside => &["farm_auxiliary", "barn", "house", "shed", "yes"],
    };
    let mut t = tags(&[("building", kinds.choose(rng).copied().unwrap_or("yes"))]);
    if rng.gen_bool(0.25) {
        t.push((
            "building:levels".to_owned(),
            rng.gen_range(1..=4).to_string(),
        ));
    }
    t
}

fn area_of(p: P) -> Area {
    if (-6.2..=-3.96).contains(&p.x) && (-1.2..=1.4).contains(&p.y) {
        Area::TownCentre
    } else {
        Area::Town
    }
}

/// Builds the whole snapshot into `b.world`.
pub(super) fn build(b: &mut Builder<'_>) {
    let grid = town(b);
    harbour(b);
    let ends: Vec<u32> = VILLAGES
        .iter()
        .enumerate()
        .map(|(k, _)| village(b, k))
        .collect();
    roads(b, &grid, &ends);
    countryside(b);
    island(b);
}

/// The town; returns the street grid's intersection nodes, row by row.
fn town(b: &mut Builder<'_>) -> Vec<u32> {
    let (nx, ny) = (GRID_BLOCKS_X + 1, GRID_BLOCKS_Y + 1);
    let mut grid = Vec::with_capacity(nx * ny);
    for j in 0..ny {
        for i in 0..nx {
            let p = P::new(
                grid_x(i) + b.rng.gen_range(-0.006..0.006),
                grid_y(j) + b.rng.gen_range(-0.006..0.006),
            );
            if i % 5 == 0 {
                b.begin(area_of(p));
            }
            grid.push(b.node(p, Vec::new(), Kind::Vertex));
        }
    }
    let col_names: Vec<String> = (0..nx)
        .map(|i| match i {
            9 => "Chandlers Road".to_owned(),
            _ if i == nx - 1 => "Quayside".to_owned(),
            _ => b.names.street(b.rng),
        })
        .collect();
    let row_names: Vec<String> = (0..ny)
        .map(|j| {
            if j == MAIN_STREET_ROW {
                MAIN_STREET.to_owned()
            } else {
                b.names.street(b.rng)
            }
        })
        .collect();
    // Streets in segments of five blocks, sharing their end nodes.
    let street = |b: &mut Builder<'_>, nodes: Vec<u32>, name: &str, major: bool| {
        let Some(&first) = nodes.first() else { return };
        b.begin(area_of(b.world.node_p(first)));
        let mut t = tags(&[
            ("highway", if major { "tertiary" } else { "residential" }),
            ("name", name),
        ]);
        if b.rng.gen_bool(0.3) {
            t.push(("surface".to_owned(), "asphalt".to_owned()));
        }
        b.way(nodes, t, Kind::Street);
    };
    for i in 0..nx {
        for s in (0..ny - 1).step_by(5) {
            let nodes = (s..=(s + 5).min(ny - 1))
                .map(|j| grid[j * nx + i])
                .collect();
            street(b, nodes, &col_names[i], i == 9);
        }
    }
    for j in 0..ny {
        for s in (0..nx - 1).step_by(5) {
            let nodes = (s..=(s + 5).min(nx - 1))
                .map(|i| grid[j * nx + i])
                .collect();
            street(b, nodes, &row_names[j], j == MAIN_STREET_ROW);
        }
    }
    for bj in 0..GRID_BLOCKS_Y {
        for bi in 0..GRID_BLOCKS_X {
            block(b, bi, bj, &col_names, &row_names);
        }
    }
    shops(b);
    town_pois(b);
    footpaths(b, &grid, nx);
    b.begin(Area::TownCentre);
    b.node(
        TOWN_CENTRE,
        tags(&[
            ("place", "town"),
            ("name", TOWN_NAME),
            ("population", "8400"),
        ]),
        Kind::Place,
    );
    grid
}

/// Buildings along the four sides of one block, denser towards the centre.
fn block(b: &mut Builder<'_>, bi: usize, bj: usize, cols: &[String], rows: &[String]) {
    let (x0, x1) = (grid_x(bi), grid_x(bi + 1));
    let (y0, y1) = (grid_y(bj), grid_y(bj + 1));
    let c = P::new((x0 + x1) / 2.0, (y0 + y1) / 2.0);
    let d = c.dist(TOWN_CENTRE);
    let (p, spacing) = if d < 1.1 {
        (0.8, 0.022)
    } else if d < 1.8 {
        (0.5, 0.03)
    } else {
        (0.32, 0.034)
    };
    let area = area_of(c);
    b.begin(area);
    let inset = 0.016;
    // (start, direction along the side, street name)
    let sides = [
        (P::new(x0, y0 + inset), (1.0, 0.0), &rows[bj]),
        (P::new(x0, y1 - inset), (1.0, 0.0), &rows[bj + 1]),
        (P::new(x0 + inset, y0), (0.0, 1.0), &cols[bi]),
        (P::new(x1 - inset, y0), (0.0, 1.0), &cols[bi + 1]),
    ];
    for (start, u, name) in sides {
        let mut t = 0.03;
        while t < 0.15 {
            if b.rng.gen_bool(p) {
                let centre = start.offset(u.0 * t, u.1 * t);
                let mut tg = building_tags(b.rng, area);
                if b.rng.gen_bool(0.4) {
                    tg.push(("addr:street".to_owned(), name.clone()));
                    tg.push((
                        "addr:housenumber".to_owned(),
                        b.rng.gen_range(1..180).to_string(),
                    ));
                }
                b.building(centre, u, tg);
            }
            t += spacing * b.rng.gen_range(0.85..1.2);
        }
    }
}

/// The shops on both sides of the main street.
fn shops(b: &mut Builder<'_>) {
    let y = grid_y(MAIN_STREET_ROW);
    let mut number = [1u32, 2u32];
    for (side, off) in [(0usize, -0.016), (1, 0.016)] {
        let mut x = SHOP_SPAN.0;
        while x < SHOP_SPAN.1 {
            b.begin(Area::TownCentre);
            let (k, v) = SHOP_KINDS
                .choose(b.rng)
                .copied()
                .unwrap_or(("shop", "gift"));
            let name = b.names.business(b.rng, v);
            let mut t = tags(&[(k, v), ("name", &name), ("addr:street", MAIN_STREET)]);
            t.push(("addr:housenumber".to_owned(), number[side].to_string()));
            number[side] += 2;
            if b.rng.gen_bool(0.5) {
                let oh = OPENING_HOURS
                    .choose(b.rng)
                    .copied()
                    .unwrap_or("Mo-Sa 09:00-18:00");
                t.push(("opening_hours".to_owned(), oh.to_owned()));
            }
            let p = P::new(x + b.rng.gen_range(-0.004..0.004), y + off);
            b.node(p, t, Kind::Shop);
            x += b.rng.gen_range(0.042..0.058);
        }
    }
}

/// A point-of-interest tag set for an area; named kinds get a fresh name.
pub(super) fn poi_tags(rng: &mut ChaCha8Rng, names: &mut Names, area: Area) -> Tags {
    let choices: &[(&str, &str)] = match area {
        Area::TownCentre => &[
            ("amenity", "bench"),
            ("amenity", "post_box"),
            ("amenity", "cafe"),
            ("amenity", "restaurant"),
            ("amenity", "bicycle_parking"),
            ("amenity", "drinking_water"),
            ("shop", "books"),
            ("shop", "gift"),
            ("amenity", "place_of_worship"),
            ("amenity", "toilets"),
        ],
        Area::Town => &[
            ("amenity", "bench"),
            ("amenity", "post_box"),
            ("leisure", "playground"),
            ("shop", "convenience"),
            ("highway", "bus_stop"),
            ("amenity", "school"),
            ("shop", "hairdresser"),
        ],
        Area::Harbour => &[
            ("leisure", "slipway"),
            ("amenity", "boat_rental"),
            ("shop", "seafood"),
            ("amenity", "bench"),
            ("amenity", "restaurant"),
        ],
        Area::Village(_) => &[
            ("amenity", "bench"),
            ("highway", "bus_stop"),
            ("shop", "convenience"),
            ("amenity", "pub"),
            ("amenity", "post_box"),
            ("leisure", "picnic_table"),
        ],
        Area::Countryside => &[
            ("tourism", "viewpoint"),
            ("amenity", "bench"),
            ("man_made", "water_well"),
            ("amenity", "hunting_stand"),
            ("shop", "farm"),
        ],
    };
    let (k, v) = choices.choose(rng).copied().unwrap_or(("amenity", "bench"));
    let mut t = tags(&[(k, v)]);
    let named = matches!(
        v,
        "cafe"
            | "restaurant"
            | "books"
            | "gift"
            | "place_of_worship"
            | "convenience"
            | "school"
            | "hairdresser"
            | "seafood"
            | "pub"
            | "farm"
    );
    if named {
        let name = names.business(rng, v);
        t.push(("name".to_owned(), name));
    }
    if v == "place_of_worship" {
        t.push(("religion".to_owned(), "christian".to_owned()));
    }
    t
}

fn town_pois(b: &mut Builder<'_>) {
    for (area, n) in [(Area::TownCentre, 90), (Area::Town, 70)] {
        for _ in 0..n {
            b.begin(area);
            let p = b.geo.sample(area, b.rng);
            let t = poi_tags(b.rng, b.names, area);
            b.node(p, t, Kind::Poi);
        }
    }
}

/// A wandering line of `n` new points from `start`, or `None` if it would leave land.
pub(super) fn walk(
    geo: &Geo,
    rng: &mut ChaCha8Rng,
    start: P,
    n: usize,
    step: (f64, f64),
) -> Option<Vec<P>> {
    let mut a = rng.gen_range(0.0..TAU);
    let mut p = start;
    let mut out = Vec::with_capacity(n);
    for _ in 0..n {
        a += rng.gen_range(-0.5..0.5);
        let s = rng.gen_range(step.0..step.1);
        p = p.offset(s * a.cos(), s * a.sin());
        if !geo.is_land(p) {
            return None;
        }
        out.push(p);
    }
    Some(out)
}

fn footpaths(b: &mut Builder<'_>, grid: &[u32], nx: usize) {
    let central: Vec<u32> = grid
        .iter()
        .copied()
        .filter(|&n| area_of(b.world.node_p(n)) == Area::TownCentre)
        .collect();
    for _ in 0..70 {
        let Some(&start) = central.choose(b.rng) else {
            break;
        };
        b.begin(Area::TownCentre);
        let n = b.rng.gen_range(2..=5);
        let Some(points) = walk(b.geo, b.rng, b.world.node_p(start), n, (0.025, 0.05)) else {
            continue;
        };
        let mut nodes = vec![start];
        nodes.extend(
            points
                .into_iter()
                .map(|p| b.node(p, Vec::new(), Kind::Vertex)),
        );
        b.way(nodes, tags(&[("highway", "footway")]), Kind::Path);
    }
    // A promenade along the quay, where the land allows.
    let points: Vec<P> = (0..30)
        .map(|k| P::new(-3.74, -0.8 + 0.06 * f64::from(k)))
        .filter(|&p| b.geo.is_land(p))
        .collect();
    if points.len() > 2 {
        b.begin(Area::Harbour);
        let mut nodes: Vec<u32> = points
            .into_iter()
            .map(|p| b.node(p, Vec::new(), Kind::Vertex))
            .collect();
        if let Some(&end) = grid.get(MAIN_STREET_ROW * nx + nx - 1) {
            nodes.push(end);
        }
        b.way(
            nodes,
            tags(&[("highway", "footway"), ("name", "Quay Promenade")]),
            Kind::Path,
        );
    }
}

/// Tags of a buoy or mooring.
pub(super) fn seamark_tags(rng: &mut ChaCha8Rng) -> Tags {
    match rng.gen_range(0..4) {
        0 => tags(&[
            ("seamark:type", "buoy_lateral"),
            ("seamark:buoy_lateral:category", "port"),
            ("seamark:buoy_lateral:colour", "red"),
        ]),
        1 => tags(&[
            ("seamark:type", "buoy_lateral"),
            ("seamark:buoy_lateral:category", "starboard"),
            ("seamark:buoy_lateral:colour", "green"),
        ]),
        2 => tags(&[
            ("seamark:type", "buoy_cardinal"),
            ("seamark:buoy_cardinal:category", "north"),
        ]),
        _ => tags(&[
            ("seamark:type", "mooring"),
            ("seamark:mooring:category", "buoy"),
        ]),
    }
}

fn harbour(b: &mut Builder<'_>) {
    b.begin(Area::Harbour);
    let named: [(&str, &str, &str); 3] = [
        ("amenity", "ferry_terminal", "Quillhaven Ferry Quay"),
        ("leisure", "marina", "Quillhaven Marina"),
        ("shop", "seafood", "Harbour Fish Hall"),
    ];
    for (k, v, name) in named {
        let p = b.geo.sample(Area::Harbour, b.rng);
        b.node(p, tags(&[(k, v), ("name", name)]), Kind::Poi);
    }
    for _ in 0..12 {
        let p = b.geo.sample(Area::Harbour, b.rng);
        let t = poi_tags(b.rng, b.names, Area::Harbour);
        b.node(p, t, Kind::Poi);
    }
    for k in 0..22 {
        b.begin(Area::Harbour);
        let near = if k < 14 { HARBOUR } else { P::new(1.6, 0.0) };
        if let Some(p) = b.geo.sample_water(near, b.rng) {
            let t = seamark_tags(b.rng);
            b.node(p, t, Kind::Seamark);
        }
    }
    let head = [P::new(-0.3, 3.3), P::new(-0.5, 3.4), P::new(-0.6, 3.6)];
    if let Some(&p) = head.iter().find(|&&p| b.geo.is_land(p)) {
        b.node(
            p,
            tags(&[
                ("man_made", "lighthouse"),
                ("seamark:type", "light_major"),
                ("name", "Quillhaven Head Light"),
            ]),
            Kind::Seamark,
        );
    }
}

/// A village; returns its central crossroads node.
fn village(b: &mut Builder<'_>, k: usize) -> u32 {
    let area = Area::Village(k);
    let Some(v) = VILLAGES.get(k) else {
        return 0;
    };
    b.begin(area);
    let centre = b.node(v.centre, Vec::new(), Kind::Vertex);
    let base = b.rng.gen_range(0.0..TAU / 6.0);
    for s in 0..3 {
        b.begin(area);
        let a = base + f64::from(s) * TAU / 6.0;
        let u = (a.cos(), a.sin());
        let half = 0.7;
        let mut nodes = Vec::new();
        for step in -10i32..=10 {
            if step == 0 {
                nodes.push(centre);
                continue;
            }
            let t = half * f64::from(step) / 10.0;
            let p = jitter(v.centre.offset(u.0 * t, u.1 * t), 0.004, b.rng);
            if b.geo.is_land(p) {
                nodes.push(b.node(p, Vec::new(), Kind::Vertex));
            }
        }
        let name = b.names.street(b.rng);
        let highway = if s == 0 { "tertiary" } else { "residential" };
        b.way(
            nodes,
            tags(&[("highway", highway), ("name", &name)]),
            Kind::Street,
        );
        let mut t = -half + 0.05;
        while t < half - 0.05 {
            for side in [-1.0, 1.0] {
                if t.abs() > 0.04 && b.rng.gen_bool(0.6) {
                    let c = v
                        .centre
                        .offset(u.0 * t - u.1 * 0.022 * side, u.1 * t + u.0 * 0.022 * side);
                    let tg = building_tags(b.rng, area);
                    b.building(c, u, tg);
                }
            }
            t += b.rng.gen_range(0.028..0.04);
        }
    }
    b.begin(area);
    let place = v.centre.offset(0.015, 0.012);
    b.node(
        place,
        tags(&[("place", "village"), ("name", v.name)]),
        Kind::Place,
    );
    let fixed: [(&str, &str); 6] = [
        ("amenity", "place_of_worship"),
        ("amenity", "pub"),
        ("shop", "convenience"),
        ("amenity", "school"),
        ("highway", "bus_stop"),
        ("amenity", "post_box"),
    ];
    for (key, value) in fixed {
        let p = jitter(v.centre, 0.2, b.rng);
        if !b.geo.is_land(p) {
            continue;
        }
        let mut t = tags(&[(key, value)]);
        if value != "post_box" {
            let name = b.names.business(b.rng, value);
            t.push(("name".to_owned(), name));
        }
        b.node(p, t, Kind::Poi);
    }
    for _ in 0..6 {
        let p = b.geo.sample(area, b.rng);
        let t = poi_tags(b.rng, b.names, area);
        b.node(p, t, Kind::Poi);
    }
    centre
}

/// A country road from node `a` to node `b`, gently curved, in ways of up to 30 nodes.
fn road(bld: &mut Builder<'_>, a: u32, b: u32, name: &str, highway: &str) -> Vec<u32> {
    let (pa, pb) = (bld.world.node_p(a), bld.world.node_p(b));
    let len = pa.dist(pb);
    let steps = (len / 0.12).ceil().max(2.0);
    #[allow(
        clippy::cast_possible_truncation,
        clippy::cast_sign_loss,
        reason = "a few hundred"
    )]
    let steps_n = steps as u32;
    let bend = bld.rng.gen_range(-0.4..0.4);
    let (ux, uy) = ((pb.x - pa.x) / len.max(1e-9), (pb.y - pa.y) / len.max(1e-9));
    let mut nodes = vec![a];
    for s in 1..steps_n {
        let t = f64::from(s) / steps;
        let off = bend * (std::f64::consts::PI * t).sin();
        let p = P::new(
            pa.x + (pb.x - pa.x) * t - uy * off,
            pa.y + (pb.y - pa.y) * t + ux * off,
        );
        let p = jitter(p, 0.008, bld.rng);
        if bld.geo.is_land(p) {
            nodes.push(bld.node(p, Vec::new(), Kind::Vertex));
        }
    }
    nodes.push(b);
    let mut ways = Vec::new();
    let mut start = 0;
    while start + 1 < nodes.len() {
        let end = (start + 29).min(nodes.len() - 1);
        bld.begin(Area::Countryside);
        let t = tags(&[("highway", highway), ("name", name)]);
        ways.push(bld.way(nodes[start..=end].to_vec(), t, Kind::Street));
        start = end;
    }
    ways
}

fn roads(b: &mut Builder<'_>, grid: &[u32], ends: &[u32]) {
    let nx = GRID_BLOCKS_X + 1;
    let at = |i: usize, j: usize| grid.get(j * nx + i).copied().unwrap_or(0);
    let end = |k: usize| ends.get(k).copied().unwrap_or(0);
    let name = |k: usize| VILLAGES.get(k).map_or("Country Road", |v| v.name);
    let west = at(0, MAIN_STREET_ROW);
    let r0 = road(b, west, end(0), &format!("{} Road", name(0)), "secondary");
    let r3 = road(b, end(0), end(3), &format!("{} Road", name(3)), "tertiary");
    let r1 = road(
        b,
        at(0, 3),
        end(1),
        &format!("{} Road", name(1)),
        "secondary",
    );
    let r2 = road(
        b,
        at(3, 0),
        end(2),
        &format!("{} Road", name(2)),
        "tertiary",
    );
    road(b, end(2), end(1), "Old Ridge Road", "unclassified");
    b.begin(Area::Town);
    let route = |ways: Vec<u32>| ways.into_iter().map(|w| (w, "")).collect::<Vec<_>>();
    let meta = b.meta_for_relation();
    b.world.add_relation(
        route([r0, r3].concat()),
        tags(&[
            ("type", "route"),
            ("route", "bus"),
            ("ref", "3"),
            ("network", "VCB"),
            ("name", "Bus 3: Quillhaven - Aubrelin"),
        ]),
        meta,
    );
    let meta = b.meta_for_relation();
    b.world.add_relation(
        route([r1, r2].concat()),
        tags(&[
            ("type", "route"),
            ("route", "bus"),
            ("ref", "7"),
            ("network", "VCB"),
            ("name", "Bus 7: Quillhaven - Tessendrue - Korrowind"),
        ]),
        meta,
    );
}

impl Builder<'_> {
    fn meta_for_relation(&mut self) -> Meta {
        let p = TOWN_CENTRE.to_e7();
        self.meta(p.0, p.1)
    }
}

fn ring(b: &mut Builder<'_>, c: P, r: f64, n: u32) -> Vec<P> {
    (0..n)
        .map(|k| {
            let a = TAU * f64::from(k) / f64::from(n) + b.rng.gen_range(-0.2..0.2);
            let rr = r * b.rng.gen_range(0.7..1.1);
            P::new(c.x + rr * a.cos(), c.y + rr * a.sin())
        })
        .collect()
}

/// Tags of a landuse area.
pub(super) fn landuse_tags(rng: &mut ChaCha8Rng) -> Tags {
    match rng.gen_range(0..20) {
        0..=11 => tags(&[("landuse", "farmland")]),
        12..=14 => tags(&[("landuse", "meadow")]),
        15 => tags(&[("landuse", "orchard")]),
        16..=17 => tags(&[("natural", "wood")]),
        _ => tags(&[("landuse", "forest")]),
    }
}

fn countryside(b: &mut Builder<'_>) {
    let area = Area::Countryside;
    for _ in 0..220 {
        b.begin(area);
        let c = b.geo.sample(area, b.rng);
        let r = b.rng.gen_range(0.12..0.32);
        let n = b.rng.gen_range(6..=9);
        let corners = ring(b, c, r, n);
        if b.geo.all_land(&corners) {
            let t = landuse_tags(b.rng);
            b.area_way(&corners, t, Kind::Landuse);
        }
    }
    for _ in 0..2 {
        b.begin(area);
        let c = b.geo.sample(area, b.rng);
        let outer = ring(b, c, 0.5, 12);
        let inner = ring(b, c, 0.12, 6);
        if !b.geo.all_land(&outer) {
            continue;
        }
        let o = b.area_way(&outer, Vec::new(), Kind::Outline);
        let i = b.area_way(&inner, Vec::new(), Kind::Outline);
        let name = b.names.business(b.rng, "wood");
        let meta = b.meta_for_relation();
        b.world.add_relation(
            vec![(o, "outer"), (i, "inner")],
            tags(&[
                ("type", "multipolygon"),
                ("landuse", "forest"),
                ("name", &name),
            ]),
            meta,
        );
    }
    for _ in 0..60 {
        b.begin(area);
        let c = b.geo.sample(area, b.rng);
        let a = b.rng.gen_range(0.0..TAU);
        let mut t = tags(&[("building", "farm")]);
        if b.rng.gen_bool(0.5) {
            let name = b.names.business(b.rng, "farm");
            t.push(("name".to_owned(), name));
        }
        b.building(c, (a.cos(), a.sin()), t);
    }
    for _ in 0..50 {
        b.begin(area);
        let c = b.geo.sample(area, b.rng);
        let n = b.rng.gen_range(4..=8);
        let Some(points) = walk(b.geo, b.rng, c, n, (0.08, 0.15)) else {
            continue;
        };
        let nodes = points
            .into_iter()
            .map(|p| b.node(p, Vec::new(), Kind::Vertex))
            .collect();
        b.way(
            nodes,
            tags(&[("highway", "track"), ("tracktype", "grade2")]),
            Kind::Path,
        );
    }
}

fn island(b: &mut Builder<'_>) {
    b.begin(Area::Harbour);
    b.node(
        ISLAND,
        tags(&[("place", "islet"), ("name", ISLAND_NAME)]),
        Kind::Place,
    );
    let light = ISLAND.offset(0.25, 0.15);
    if b.geo.is_land(light) {
        b.node(
            light,
            tags(&[
                ("man_made", "lighthouse"),
                ("seamark:type", "light_major"),
                ("name", "Mavrenna Light"),
            ]),
            Kind::Seamark,
        );
    }
    b.building(
        ISLAND.offset(0.22, 0.1),
        (1.0, 0.0),
        tags(&[("building", "yes")]),
    );
}
