//! The scenario's map state with full history semantics: every node, way and relation with its
//! current version, tags and visibility, a coarse spatial index for picking nearby objects, and
//! [`Session`], the only way the diff period changes the map. A session applies one changeset's
//! edits (version + 1 each, deleted ways take their orphaned nodes with them), writes each edit
//! to the day's osmChange file and keeps the changeset's bounding box and change count.

use super::geography::P;
use super::people::User;
use super::sample::mix;
use super::xml::DiffWriter;
use super::DemoError;
use crate::model::Op;
use std::collections::HashMap;

/// First snapshot node id; new nodes continue after the snapshot's.
pub(super) const NODE_BASE: i64 = 50_000_000_000;
/// First snapshot way id.
pub(super) const WAY_BASE: i64 = 5_000_000_000;
/// First snapshot relation id.
pub(super) const REL_BASE: i64 = 600_000_000;

/// Per-element history metadata.
#[derive(Debug, Clone, Copy)]
pub(super) struct Meta {
    pub version: u32,
    pub ts: i64,
    pub cs: i64,
    pub user: u32,
}

/// Tags in the order they are written.
pub(super) type Tags = Vec<(String, String)>;

/// Builds [`Tags`] from string pairs.
pub(super) fn tags(pairs: &[(&str, &str)]) -> Tags {
    pairs
        .iter()
        .map(|(k, v)| ((*k).to_owned(), (*v).to_owned()))
        .collect()
}

/// Sets or replaces one tag.
pub(super) fn set_tag(t: &mut Tags, k: &str, v: &str) {
    match t.iter_mut().find(|(key, _)| key == k) {
        Some(slot) => v.clone_into(&mut slot.1),
        None => t.push((k.to_owned(), v.to_owned())),
    }
}

/// The value of a tag.
pub(super) fn tag<'a>(t: &'a Tags, k: &str) -> Option<&'a str> {
    t.iter().find(|(key, _)| key == k).map(|(_, v)| v.as_str())
}

/// What an element is, for picking candidates.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(super) enum Kind {
    /// An untagged node of a way.
    Vertex,
    /// A tagged stand-alone node (amenity, small shop, bench ...).
    Poi,
    /// A shop on the town's main street.
    Shop,
    /// A buoy or light, legitimately in the water.
    Seamark,
    /// A `place=*` node.
    Place,
    Building,
    Street,
    Path,
    Landuse,
    /// An untagged way that is a multipolygon member.
    Outline,
}

/// A node.
pub(super) struct Node {
    pub lat: i32,
    pub lon: i32,
    pub meta: Meta,
    pub tags: Tags,
    pub visible: bool,
    /// Visible ways that use this node.
    pub refs: u32,
    pub kind: Kind,
    /// Last touched by an injected incident: ordinary mappers leave it alone.
    pub incident: bool,
}

/// A way.
pub(super) struct Way {
    pub nodes: Vec<u32>,
    pub meta: Meta,
    pub tags: Tags,
    pub visible: bool,
    pub kind: Kind,
    /// Member of a relation: never deleted.
    pub in_rel: bool,
    pub incident: bool,
}

/// A relation; the scenario's relations have only way members.
pub(super) struct Relation {
    pub members: Vec<(u32, &'static str)>,
    pub meta: Meta,
    pub tags: Tags,
}

/// Every kind, for [`World::near`] when `keep` looks at something else.
pub(super) const ALL_KINDS: [Kind; 10] = [
    Kind::Vertex,
    Kind::Poi,
    Kind::Shop,
    Kind::Seamark,
    Kind::Place,
    Kind::Building,
    Kind::Street,
    Kind::Path,
    Kind::Landuse,
    Kind::Outline,
];

/// A node or way, by index.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(super) enum Item {
    Node(u32),
    Way(u32),
}

/// A bounding box in 1e-7 degree units.
#[derive(Debug, Clone, Copy)]
pub(super) struct Bbox {
    pub min_lat: i32,
    pub min_lon: i32,
    pub max_lat: i32,
    pub max_lon: i32,
}

impl Bbox {
    pub fn point(lat: i32, lon: i32) -> Self {
        Self {
            min_lat: lat,
            min_lon: lon,
            max_lat: lat,
            max_lon: lon,
        }
    }

    pub fn extend(b: &mut Option<Self>, lat: i32, lon: i32) {
        match b {
            Some(b) => {
                b.min_lat = b.min_lat.min(lat);
                b.min_lon = b.min_lon.min(lon);
                b.max_lat = b.max_lat.max(lat);
                b.max_lon = b.max_lon.max(lon);
            }
            None => *b = Some(Self::point(lat, lon)),
        }
    }
}

/// A changeset's metadata as the changeset dump carries it.
pub(super) struct ChangesetMeta {
    pub id: i64,
    pub user: u32,
    pub created_at: i64,
    pub closed_at: i64,
    pub bbox: Option<Bbox>,
    pub num_changes: u32,
    pub tags: Vec<(&'static str, String)>,
}

/// Grid cell size of the spatial index, km.
const CELL_KM: f64 = 0.2;
/// South-west corner of the indexed area, km.
const GRID_X0: f64 = -22.0;
const GRID_Y0: f64 = -18.0;
const GRID_NX: usize = 170;
const GRID_NY: usize = 180;

/// An indexed item and where it is now ([`World::item_p`]), so that [`World::near`] measures
/// distances without visiting the item.
#[derive(Debug, Clone, Copy)]
struct Entry {
    it: Item,
    kind: Kind,
    x: f64,
    y: f64,
}

/// Below this many entries a cell's hidden items are left in place.
const COMPACT_MIN: u32 = 16;

/// The map.
pub(super) struct World {
    pub nodes: Vec<Node>,
    pub ways: Vec<Way>,
    pub relations: Vec<Relation>,
    /// Indexed items by grid cell, in the order they were added.
    cells: Vec<Vec<Entry>>,
    /// Per cell: how many of its entries are hidden (deleted) items.
    hidden: Vec<u32>,
    /// Per indexed node, the cell it was indexed in (`u32::MAX`: not indexed).
    node_cell: Vec<u32>,
    /// Per way, the cell it was indexed in (`u32::MAX`: outside the grid).
    way_cell: Vec<u32>,
    /// Per way, its centre ([`World::way_p`]), recomputed whenever its nodes change or move.
    way_centre: Vec<P>,
    /// Per node, the first way that used it (`u32::MAX`: none).
    node_way: Vec<u32>,
    /// The further ways of nodes used by more than one way.
    node_more_ways: HashMap<u32, Vec<u32>>,
}

fn cell_xy(p: P) -> Option<(usize, usize)> {
    let fx = ((p.x - GRID_X0) / CELL_KM).floor();
    let fy = ((p.y - GRID_Y0) / CELL_KM).floor();
    if !(0.0..GRID_NX as f64).contains(&fx) || !(0.0..GRID_NY as f64).contains(&fy) {
        return None;
    }
    #[allow(
        clippy::cast_possible_truncation,
        clippy::cast_sign_loss,
        reason = "range checked"
    )]
    Some((fx as usize, fy as usize))
}

fn idx(v: usize) -> u32 {
    u32::try_from(v).unwrap_or(u32::MAX)
}

impl World {
    pub fn new() -> Self {
        Self {
            nodes: Vec::new(),
            ways: Vec::new(),
            relations: Vec::new(),
            cells: (0..GRID_NX * GRID_NY).map(|_| Vec::new()).collect(),
            hidden: vec![0; GRID_NX * GRID_NY],
            node_cell: Vec::new(),
            way_cell: Vec::new(),
            way_centre: Vec::new(),
            node_way: Vec::new(),
            node_more_ways: HashMap::new(),
        }
    }

    pub fn node_id(i: u32) -> i64 {
        NODE_BASE + i64::from(i)
    }

    pub fn way_id(i: u32) -> i64 {
        WAY_BASE + i64::from(i)
    }

    pub fn rel_id(i: u32) -> i64 {
        REL_BASE + i64::from(i)
    }

    pub fn node(&self, i: u32) -> &Node {
        &self.nodes[i as usize]
    }

    pub fn way(&self, i: u32) -> &Way {
        &self.ways[i as usize]
    }

    /// A node's position in the frame.
    pub fn node_p(&self, i: u32) -> P {
        let n = self.node(i);
        P::from_e7(n.lat, n.lon)
    }

    /// Mean of a way's distinct node positions.
    pub fn way_p(&self, i: u32) -> P {
        let w = self.way(i);
        let nodes = match w.nodes.split_last() {
            Some((last, rest)) if w.nodes.first() == Some(last) => rest,
            _ => &w.nodes[..],
        };
        let (mut x, mut y) = (0.0, 0.0);
        for &n in nodes {
            let p = self.node_p(n);
            x += p.x;
            y += p.y;
        }
        let k = nodes.len().max(1) as f64;
        P::new(x / k, y / k)
    }

    /// Where an item is (a way: its kept centre, equal to [`World::way_p`]).
    pub fn item_p(&self, it: Item) -> P {
        match it {
            Item::Node(n) => self.node_p(n),
            Item::Way(w) => self
                .way_centre
                .get(w as usize)
                .copied()
                .unwrap_or_else(|| self.way_p(w)),
        }
    }

    /// Records that way `w` uses node `n`.
    fn link(&mut self, n: u32, w: u32) {
        match self.node_way.get_mut(n as usize) {
            Some(first) if *first == u32::MAX => *first = w,
            Some(first) if *first == w => {}
            Some(_) => self.node_more_ways.entry(n).or_default().push(w),
            None => {}
        }
    }

    /// Recomputes a way's kept centre.
    fn refresh_way(&mut self, w: u32) {
        let p = self.way_p(w);
        if let Some(c) = self.way_centre.get_mut(w as usize) {
            *c = p;
        }
        self.reposition(Item::Way(w));
    }

    /// Recomputes the centres of the ways that use node `n`, after it moved.
    fn node_moved(&mut self, n: u32) {
        self.reposition(Item::Node(n));
        if let Some(&first) = self.node_way.get(n as usize) {
            if first != u32::MAX {
                self.refresh_way(first);
            }
        }
        let more = self.node_more_ways.get(&n).cloned().unwrap_or_default();
        for w in more {
            self.refresh_way(w);
        }
    }

    /// Puts an item in the cell of `p`; returns the cell, `u32::MAX` outside the grid.
    fn index(&mut self, p: P, it: Item) -> u32 {
        match cell_xy(p) {
            Some((x, y)) => {
                let c = y * GRID_NX + x;
                let q = self.item_p(it);
                let kind = match it {
                    Item::Node(n) => self.node(n).kind,
                    Item::Way(w) => self.way(w).kind,
                };
                self.cells[c].push(Entry {
                    it,
                    kind,
                    x: q.x,
                    y: q.y,
                });
                idx(c)
            }
            None => u32::MAX,
        }
    }

    /// Updates the position kept in an indexed item's entry after it moved.
    fn reposition(&mut self, it: Item) {
        let cell = match it {
            Item::Node(n) => self.node_cell.get(n as usize).copied(),
            Item::Way(w) => self.way_cell.get(w as usize).copied(),
        };
        let Some(c) = cell.map(|c| c as usize).filter(|&c| c < self.cells.len()) else {
            return;
        };
        let q = self.item_p(it);
        if let Some(e) = self.cells[c].iter_mut().find(|e| e.it == it) {
            e.x = q.x;
            e.y = q.y;
        }
    }

    /// Makes an item invisible (deleted). Its cell drops hidden entries once they are half of
    /// it, keeping the order of the rest, so [`World::near`] does not keep scanning the dead.
    fn hide(&mut self, it: Item) {
        let cell = match it {
            Item::Node(n) => {
                self.nodes[n as usize].visible = false;
                self.node_cell.get(n as usize).copied()
            }
            Item::Way(w) => {
                self.ways[w as usize].visible = false;
                self.way_cell.get(w as usize).copied()
            }
        };
        let Some(c) = cell.map(|c| c as usize).filter(|&c| c < self.cells.len()) else {
            return;
        };
        self.hidden[c] += 1;
        let len = idx(self.cells[c].len());
        if self.hidden[c] >= COMPACT_MIN && self.hidden[c] * 2 >= len {
            let (nodes, ways) = (&self.nodes, &self.ways);
            self.cells[c].retain(|e| match e.it {
                Item::Node(n) => nodes[n as usize].visible,
                Item::Way(w) => ways[w as usize].visible,
            });
            self.hidden[c] = 0;
        }
    }

    /// Adds a node; tagged stand-alone kinds are indexed for picking.
    pub fn add_node(&mut self, p: P, tags: Tags, kind: Kind, meta: Meta) -> u32 {
        let (lat, lon) = p.to_e7();
        let i = idx(self.nodes.len());
        self.node_way.push(u32::MAX);
        self.nodes.push(Node {
            lat,
            lon,
            meta,
            tags,
            visible: true,
            refs: 0,
            kind,
            incident: false,
        });
        let cell = if kind == Kind::Vertex {
            u32::MAX
        } else {
            self.index(p, Item::Node(i))
        };
        self.node_cell.push(cell);
        i
    }

    /// Adds a way over existing nodes and indexes it at its centre.
    pub fn add_way(&mut self, nodes: Vec<u32>, tags: Tags, kind: Kind, meta: Meta) -> u32 {
        let i = idx(self.ways.len());
        let mut seen = nodes.clone();
        seen.sort_unstable();
        seen.dedup();
        for &n in &seen {
            self.nodes[n as usize].refs += 1;
            self.link(n, i);
        }
        self.ways.push(Way {
            nodes,
            meta,
            tags,
            visible: true,
            kind,
            in_rel: false,
            incident: false,
        });
        let p = self.way_p(i);
        self.way_centre.push(p);
        let cell = self.index(p, Item::Way(i));
        self.way_cell.push(cell);
        i
    }

    /// Adds a relation over existing ways, which become undeletable.
    pub fn add_relation(&mut self, members: Vec<(u32, &'static str)>, tags: Tags, meta: Meta) {
        for &(w, _) in &members {
            self.ways[w as usize].in_rel = true;
        }
        self.relations.push(Relation {
            members,
            meta,
            tags,
        });
    }

    /// Visible items of the given kinds within `r` km of `p` that `keep` accepts, nearest cells
    /// first. `kinds` only spares visiting items `keep` would refuse anyway.
    pub fn near(
        &self,
        p: P,
        r: f64,
        kinds: &[Kind],
        keep: impl Fn(&Self, Item) -> bool,
    ) -> Vec<Item> {
        let (Some((x0, y0)), Some((x1, y1))) = (cell_xy(p.offset(-r, -r)), cell_xy(p.offset(r, r)))
        else {
            return Vec::new();
        };
        // `dist(p) <= r` decided on squared distances, with `hypot` itself only within a
        // relative 1e-9 of the radius, where rounding could tell the two apart.
        let (inside, outside) = (r * r * (1.0 - 1e-9), r * r * (1.0 + 1e-9));
        // The tests are pure, so testing the distance first (on the entry, without visiting the
        // item) keeps the result and its order.
        let mut out = Vec::new();
        for y in y0..=y1 {
            for x in x0..=x1 {
                for e in &self.cells[y * GRID_NX + x] {
                    if !kinds.contains(&e.kind) {
                        continue;
                    }
                    let (dx, dy) = (e.x - p.x, e.y - p.y);
                    let d2 = dx * dx + dy * dy;
                    if d2 > outside || (d2 > inside && P::new(e.x, e.y).dist(p) > r) {
                        continue;
                    }
                    let visible = match e.it {
                        Item::Node(n) => self.node(n).visible,
                        Item::Way(w) => self.way(w).visible,
                    };
                    if visible && keep(self, e.it) {
                        out.push(e.it);
                    }
                }
            }
        }
        out
    }
}

/// One changeset's edits being applied.
pub(super) struct Session<'a> {
    pub world: &'a mut World,
    out: &'a mut DiffWriter,
    users: &'a [User],
    cs: i64,
    user: u32,
    ts: i64,
    salt: u64,
    /// Bounding box of everything edited.
    pub bbox: Option<Bbox>,
    /// Number of edits.
    pub changes: u32,
    /// Sum of edited positions (x, y km) for incident centres.
    pub centre: (f64, f64, u32),
    /// Whether edits mark elements as incident-made.
    pub incident: bool,
}

impl<'a> Session<'a> {
    /// A session writing edits stamped `ts` for changeset `cs` by `user`. `salt` varies which
    /// deleted nodes omit their coordinates with the seed.
    #[allow(clippy::too_many_arguments, reason = "one call site builds it")]
    pub fn new(
        world: &'a mut World,
        out: &'a mut DiffWriter,
        users: &'a [User],
        cs: i64,
        user: u32,
        ts: i64,
        salt: u64,
        incident: bool,
    ) -> Self {
        Self {
            world,
            out,
            users,
            cs,
            user,
            ts,
            salt,
            bbox: None,
            changes: 0,
            centre: (0.0, 0.0, 0),
            incident,
        }
    }

    fn meta(&self, version: u32) -> Meta {
        Meta {
            version,
            ts: self.ts,
            cs: self.cs,
            user: self.user,
        }
    }

    fn user(&self) -> &'a User {
        let users: &'a [User] = self.users;
        &users[self.user as usize]
    }

    /// Whether an item may be edited by ordinary work now: visible, not already edited in this
    /// changeset and not the product of an incident.
    pub fn free(&self, it: Item) -> bool {
        match it {
            Item::Node(n) => {
                let n = self.world.node(n);
                n.visible && n.meta.cs != self.cs && !n.incident
            }
            Item::Way(w) => {
                let w = self.world.way(w);
                w.visible && w.meta.cs != self.cs && !w.incident
            }
        }
    }

    fn account_node(&mut self, i: u32) {
        let n = self.world.node(i);
        Bbox::extend(&mut self.bbox, n.lat, n.lon);
        let p = P::from_e7(n.lat, n.lon);
        self.centre.0 += p.x;
        self.centre.1 += p.y;
        self.centre.2 += 1;
        self.changes += 1;
    }

    fn account_way(&mut self, i: u32) {
        let w = self.world.way(i);
        for &n in &w.nodes {
            let n = self.world.node(n);
            Bbox::extend(&mut self.bbox, n.lat, n.lon);
        }
        let p = self.world.way_p(i);
        self.centre.0 += p.x;
        self.centre.1 += p.y;
        self.centre.2 += 1;
        self.changes += 1;
    }

    fn write_node(&mut self, op: Op, i: u32, coords: bool) -> Result<(), DemoError> {
        let user = self.user();
        self.out
            .node(op, World::node_id(i), self.world.node(i), user, coords)
    }

    fn write_way(&mut self, op: Op, i: u32) -> Result<(), DemoError> {
        let user = self.user();
        self.out.way(op, World::way_id(i), self.world.way(i), user)
    }

    /// Creates a node.
    pub fn create_node(&mut self, p: P, tags: Tags, kind: Kind) -> Result<u32, DemoError> {
        let meta = self.meta(1);
        let i = self.world.add_node(p, tags, kind, meta);
        self.world.nodes[i as usize].incident = self.incident;
        self.account_node(i);
        self.write_node(Op::Create, i, true)?;
        Ok(i)
    }

    /// Creates a way over existing nodes (created before it in the same diff when new).
    pub fn create_way(
        &mut self,
        nodes: Vec<u32>,
        tags: Tags,
        kind: Kind,
    ) -> Result<u32, DemoError> {
        let meta = self.meta(1);
        let i = self.world.add_way(nodes, tags, kind, meta);
        self.world.ways[i as usize].incident = self.incident;
        self.account_way(i);
        self.write_way(Op::Create, i)?;
        Ok(i)
    }

    /// Creates a closed way (building, area) from new corner nodes.
    pub fn create_area(&mut self, corners: &[P], tags: Tags, kind: Kind) -> Result<u32, DemoError> {
        let mut nodes = Vec::with_capacity(corners.len() + 1);
        for &c in corners {
            nodes.push(self.create_node(c, Vec::new(), Kind::Vertex)?);
        }
        if let Some(&first) = nodes.first() {
            nodes.push(first);
        }
        self.create_way(nodes, tags, kind)
    }

    /// Modifies a node's tags or position; the new version is written with full tags.
    pub fn modify_node(&mut self, i: u32, f: impl FnOnce(&mut Node)) -> Result<(), DemoError> {
        let meta = {
            let n = &self.world.nodes[i as usize];
            self.meta(n.meta.version + 1)
        };
        let n = &mut self.world.nodes[i as usize];
        let was = (n.lat, n.lon);
        f(n);
        n.meta = meta;
        n.incident = self.incident;
        if (n.lat, n.lon) != was {
            self.world.node_moved(i);
        }
        self.account_node(i);
        self.write_node(Op::Modify, i, true)
    }

    /// Modifies a way's tags; the new version is written with full tags and node list.
    pub fn modify_way_tags(&mut self, i: u32, f: impl FnOnce(&mut Tags)) -> Result<(), DemoError> {
        let meta = self.meta(self.world.way(i).meta.version + 1);
        let w = &mut self.world.ways[i as usize];
        f(&mut w.tags);
        w.meta = meta;
        w.incident = self.incident;
        self.account_way(i);
        self.write_way(Op::Modify, i)
    }

    /// Inserts an existing node into a way's node list after position `at`.
    pub fn insert_way_node(&mut self, i: u32, at: usize, node: u32) -> Result<(), DemoError> {
        let meta = self.meta(self.world.way(i).meta.version + 1);
        let w = &mut self.world.ways[i as usize];
        let at = (at + 1).min(w.nodes.len());
        let new_ref = !w.nodes.contains(&node);
        w.nodes.insert(at, node);
        w.meta = meta;
        if new_ref {
            self.world.nodes[node as usize].refs += 1;
            self.world.link(node, i);
        }
        self.world.refresh_way(i);
        self.account_way(i);
        self.write_way(Op::Modify, i)
    }

    /// Deletes a stand-alone node (or an orphaned vertex).
    pub fn delete_node(&mut self, i: u32) -> Result<(), DemoError> {
        let meta = self.meta(self.world.node(i).meta.version + 1);
        // About 30% of deleted nodes are written without their last position, as real diffs
        // sometimes are; the choice depends only on the id and the seed.
        let coords = mix(self.salt ^ i as u64) % 100 >= 30;
        self.world.hide(Item::Node(i));
        let n = &mut self.world.nodes[i as usize];
        n.meta = meta;
        n.incident = self.incident;
        self.account_node(i);
        self.write_node(Op::Delete, i, coords)
    }

    /// Deletes a way, then every node it leaves unused that has no tags of its own.
    /// Returns how many elements were deleted.
    pub fn delete_way(&mut self, i: u32) -> Result<u32, DemoError> {
        // The box of a way deletion still covers its nodes, so account before hiding it.
        let meta = self.meta(self.world.way(i).meta.version + 1);
        self.account_way(i);
        self.world.hide(Item::Way(i));
        let w = &mut self.world.ways[i as usize];
        w.meta = meta;
        w.incident = self.incident;
        let mut nodes = w.nodes.clone();
        self.write_way(Op::Delete, i)?;
        nodes.sort_unstable();
        nodes.dedup();
        let mut deleted = 1;
        for n in nodes {
            let node = &mut self.world.nodes[n as usize];
            node.refs = node.refs.saturating_sub(1);
            if node.refs == 0 && node.tags.is_empty() && node.visible {
                self.delete_node(n)?;
                deleted += 1;
            }
        }
        Ok(deleted)
    }
}

#[cfg(test)]
mod tests {
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    use super::*;

    const META: Meta = Meta {
        version: 1,
        ts: 0,
        cs: 1,
        user: 0,
    };

    /// The plain search over every item ever indexed, with way centres averaged afresh.
    fn near_by_scan(
        w: &World,
        indexed: &[(usize, Item)],
        p: P,
        r: f64,
        keep: impl Fn(&World, Item) -> bool,
    ) -> Vec<Item> {
        let (Some((x0, y0)), Some((x1, y1))) = (cell_xy(p.offset(-r, -r)), cell_xy(p.offset(r, r)))
        else {
            return Vec::new();
        };
        let mut out = Vec::new();
        for y in y0..=y1 {
            for x in x0..=x1 {
                for &(c, it) in indexed {
                    if c != y * GRID_NX + x {
                        continue;
                    }
                    let (visible, q) = match it {
                        Item::Node(n) => (w.node(n).visible, w.node_p(n)),
                        Item::Way(v) => (w.way(v).visible, w.way_p(v)),
                    };
                    if visible && keep(w, it) && q.dist(p) <= r {
                        out.push(it);
                    }
                }
            }
        }
        out
    }

    fn random_p(rng: &mut ChaCha8Rng) -> P {
        P::new(rng.gen_range(-2.0..2.0), rng.gen_range(-2.0..2.0))
    }

    #[test]
    fn near_matches_a_plain_scan_after_deletions_and_moves() {
        // Common practice, no source: the indexed search against brute force on random data.
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        let mut w = World::new();
        let mut indexed: Vec<(usize, Item)> = Vec::new();
        let mut pois = Vec::new();
        let mut vertices = Vec::new();
        for _ in 0..3000 {
            let p = random_p(&mut rng);
            let kind = if rng.gen_bool(0.4) {
                Kind::Vertex
            } else {
                Kind::Poi
            };
            let n = w.add_node(p, Vec::new(), kind, META);
            if kind == Kind::Vertex {
                vertices.push(n);
            } else if let Some((x, y)) = cell_xy(p) {
                indexed.push((y * GRID_NX + x, Item::Node(n)));
                pois.push(n);
            }
        }
        let mut ways = Vec::new();
        for _ in 0..800 {
            let k = rng.gen_range(2..6);
            let nodes: Vec<u32> = (0..k)
                .map(|_| vertices[rng.gen_range(0..vertices.len())])
                .collect();
            let kind = if rng.gen_bool(0.5) {
                Kind::Building
            } else {
                Kind::Street
            };
            let v = w.add_way(nodes, Vec::new(), kind, META);
            if let Some((x, y)) = cell_xy(w.way_p(v)) {
                indexed.push((y * GRID_NX + x, Item::Way(v)));
            }
            ways.push(v);
        }
        let mut found = 0;
        for round in 0..400 {
            match rng.gen_range(0..4) {
                0 => w.hide(Item::Node(pois[rng.gen_range(0..pois.len())])),
                1 => w.hide(Item::Way(ways[rng.gen_range(0..ways.len())])),
                2 => {
                    // A shared vertex or a point moves some way off.
                    let n = if rng.gen_bool(0.5) {
                        vertices[rng.gen_range(0..vertices.len())]
                    } else {
                        pois[rng.gen_range(0..pois.len())]
                    };
                    let (lat, lon) = random_p(&mut rng).to_e7();
                    w.nodes[n as usize].lat = lat;
                    w.nodes[n as usize].lon = lon;
                    w.node_moved(n);
                }
                _ => {
                    let v = ways[rng.gen_range(0..ways.len())];
                    let n = vertices[rng.gen_range(0..vertices.len())];
                    w.ways[v as usize].nodes.insert(1, n);
                    w.link(n, v);
                    w.refresh_way(v);
                }
            }
            let p = random_p(&mut rng);
            let r = rng.gen_range(0.05..0.8);
            let kinds: &[Kind] = if round % 2 == 0 {
                &[Kind::Building]
            } else {
                &ALL_KINDS
            };
            let keep = |w: &World, it: Item| match it {
                Item::Node(_) => round % 2 == 1,
                Item::Way(v) => w.way(v).kind == Kind::Building,
            };
            let got = w.near(p, r, kinds, keep);
            assert_eq!(got, near_by_scan(&w, &indexed, p, r, keep), "round {round}");
            found += got.len();
        }
        assert!(found > 1000, "the queries found only {found} items");
    }
}
