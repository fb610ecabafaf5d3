//! Gives every edit of an analysis window a position.
//!
//! Order of evidence: the element's own coordinates (nodes); the node-location index (latest
//! known position of each node from the snapshot and every diff, read through
//! [`Store::node_index`]) for deleted nodes without coordinates, ways (centroid of their nodes,
//! from the edit's refs or the element state's) and relations (centroid of their node and way
//! members); then the centre of the changeset's bounding box. An edit that none of these can
//! place is counted as unplaced, never silently dropped.

use std::collections::HashMap;

use crate::element_state::ElementState;
use crate::model::{Coord, ElementType, Op};
use crate::node_index::NodeIndex;
use crate::store::{member_decode, unpack_refs, Store, StoreError};
use crate::summary::Placement;

/// How an edit got its position.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PlacedBy {
    Own,
    NodeIndex,
    ChangesetBox,
    Unplaced,
}

/// One edit of the window, with its position and the state it replaced.
#[derive(Debug, Clone)]
pub struct Edit {
    pub etype: ElementType,
    pub eid: i64,
    pub version: i64,
    pub op: Op,
    pub changeset: i64,
    pub uid: i64,
    pub user: std::sync::Arc<str>,
    pub ts: i64,
    pub pos: Option<Coord>,
    pub placed_by: PlacedBy,
    /// Packed tags of this version (empty for deletions).
    pub tags: String,
    /// Packed tags of the version it replaced, when known.
    pub prev_tags: Option<String>,
    pub prev_version: Option<i64>,
    pub prev_ts: Option<i64>,
    pub prev_pos: Option<Coord>,
}

/// Changeset metadata from the store.
#[derive(Debug, Clone, Default)]
pub struct ChangesetMeta {
    pub id: i64,
    pub uid: i64,
    pub user: String,
    pub created_at: i64,
    pub closed_at: Option<i64>,
    pub bbox: Option<(Coord, Coord)>,
    pub comment: String,
    pub editor: String,
    pub num_changes: i64,
}

/// Most members followed when placing a relation; enough for a centroid, bounded for huge ones.
const MAX_MEMBERS_FOR_CENTROID: usize = 500;

/// Positions of nodes (from the node-location index) and refs of ways (from the element state).
struct Positions {
    elements: ElementState,
    nodes: NodeIndex,
    cache: foldhash::HashMap<i64, Option<Coord>>,
}

impl Positions {
    fn node(&mut self, id: i64) -> Result<Option<Coord>, StoreError> {
        if let Some(c) = self.cache.get(&id) {
            return Ok(*c);
        }
        let c = self.nodes.get(id)?.map(|e| e.coord);
        self.cache.insert(id, c);
        Ok(c)
    }

    /// Looks the nodes of `ids` up in id order, into the cache: the index is then read block
    /// after block, each block once, instead of in the order the ways name their nodes, where
    /// one block came back many times once the index outgrew its block cache (BENCHMARKS.md,
    /// "Lookups at scale").
    fn prefetch(&mut self, mut ids: Vec<i64>) -> Result<(), StoreError> {
        ids.sort_unstable();
        ids.dedup();
        for id in ids {
            if let std::collections::hash_map::Entry::Vacant(v) = self.cache.entry(id) {
                v.insert(self.nodes.get(id)?.map(|e| e.coord));
            }
        }
        Ok(())
    }

    fn stored_refs(&self, t: ElementType, id: i64) -> Result<Option<Vec<u8>>, StoreError> {
        Ok(self.elements.get(t, id)?.and_then(|r| r.refs))
    }

    fn way_centroid(&mut self, refs: &[u8]) -> Result<Option<Coord>, StoreError> {
        let mut acc = Centroid::default();
        for r in unpack_refs(refs) {
            if let Some(c) = self.node(r)? {
                acc.add(c);
            }
        }
        Ok(acc.get())
    }

    fn relation_centroid(&mut self, members: &[u8]) -> Result<Option<Coord>, StoreError> {
        let mut acc = Centroid::default();
        for code in unpack_refs(members).take(MAX_MEMBERS_FOR_CENTROID) {
            let Some((t, id)) = member_decode(code) else {
                continue;
            };
            let c = match t {
                ElementType::Node => self.node(id)?,
                ElementType::Way => match self.stored_refs(ElementType::Way, id)? {
                    Some(r) => self.way_centroid(&r)?,
                    None => None,
                },
                ElementType::Relation => None,
            };
            if let Some(c) = c {
                acc.add(c);
            }
        }
        Ok(acc.get())
    }
}

/// Mean of positions in 1e-7 degree units. Ways and relations spanning the antimeridian would
/// average to the wrong side; no such region is supported yet (documented in README).
#[derive(Default, Clone)]
struct Centroid {
    lat: i64,
    lon: i64,
    n: i64,
}

impl Centroid {
    fn add(&mut self, c: Coord) {
        self.lat += i64::from(c.lat_e7());
        self.lon += i64::from(c.lon_e7());
        self.n += 1;
    }
    fn get(&self) -> Option<Coord> {
        (self.n > 0)
            .then(|| Coord::from_e7(self.lat / self.n, self.lon / self.n))
            .flatten()
    }
}

/// Ids closer than this are read with one range query: changeset ids grow with time, so a
/// week's changesets lie in a few dense runs of ids.
const ID_RUN_GAP: i64 = 64;

fn changeset_row(r: &rusqlite::Row<'_>) -> rusqlite::Result<ChangesetMeta> {
    let bbox = match (
        r.get::<_, Option<f64>>(5)?,
        r.get::<_, Option<f64>>(6)?,
        r.get::<_, Option<f64>>(7)?,
        r.get::<_, Option<f64>>(8)?,
    ) {
        (Some(a), Some(b), Some(c), Some(d)) => {
            Coord::from_degrees(a, b).zip(Coord::from_degrees(c, d))
        }
        _ => None,
    };
    Ok(ChangesetMeta {
        id: r.get(0)?,
        uid: r.get(1)?,
        user: r.get(2)?,
        created_at: r.get(3)?,
        closed_at: r.get(4)?,
        bbox,
        comment: r.get(9)?,
        editor: r.get(10)?,
        num_changes: r.get(11)?,
    })
}

/// Loads changeset metadata by id (ids without metadata are left out).
///
/// # Errors
/// On database failure.
pub fn load_changesets(
    store: &Store,
    ids: impl IntoIterator<Item = i64>,
) -> Result<HashMap<i64, ChangesetMeta>, StoreError> {
    let mut ids: Vec<i64> = ids.into_iter().collect();
    ids.sort_unstable();
    ids.dedup();
    let mut st = store
        .conn()
        .prepare_cached(
            "SELECT id, uid, user, created_at, closed_at, min_lat, min_lon, max_lat, max_lon, comment, editor, num_changes
             FROM changesets WHERE id BETWEEN ?1 AND ?2",
        )
        .map_err(|e| store.map_err(e))?;
    let mut out = HashMap::with_capacity(ids.len());
    let mut k = 0;
    while k < ids.len() {
        let mut end = k + 1;
        while end < ids.len() && ids[end] - ids[end - 1] <= ID_RUN_GAP {
            end += 1;
        }
        let run = &ids[k..end];
        let (lo, hi) = (run[0], run[run.len() - 1]);
        let rows = st
            .query_map([lo, hi], changeset_row)
            .map_err(|e| store.map_err(e))?;
        for row in rows {
            let m = row.map_err(|e| store.map_err(e))?;
            if run.binary_search(&m.id).is_ok() {
                out.insert(m.id, m);
            }
        }
        k = end;
    }
    Ok(out)
}

/// Loads and places every edit with `from <= ts < to`, ordered by time.
///
/// # Errors
/// On database failure.
pub fn load_edits(
    store: &Store,
    from: i64,
    to: i64,
) -> Result<(Vec<Edit>, HashMap<i64, ChangesetMeta>), StoreError> {
    Locator::new(store)?.load(from, to)
}

/// Loads and places the edits of one window after another with one open node-location index,
/// whose block cache serves them all.
pub struct Locator<'a> {
    store: &'a Store,
    index: Positions,
}

impl<'a> Locator<'a> {
    /// Opens the committed node-location index.
    ///
    /// # Errors
    /// On database failure or an unreadable index.
    pub fn new(store: &'a Store) -> Result<Self, StoreError> {
        Ok(Self {
            store,
            index: Positions {
                elements: store.element_state()?,
                nodes: store.node_index()?,
                cache: foldhash::HashMap::default(),
            },
        })
    }

    /// Loads and places every edit with `from <= ts < to`, ordered by time, with the metadata
    /// of their changesets.
    ///
    /// # Errors
    /// On database failure.
    pub fn load(
        &mut self,
        from: i64,
        to: i64,
    ) -> Result<(Vec<Edit>, HashMap<i64, ChangesetMeta>), StoreError> {
        let store = self.store;
        let index = &mut self.index;
        // Node positions are cached for one window at a time, so memory follows the window
        // (the index's block cache serves the next).
        index.cache.clear();
        let coord = |p: Option<(i32, i32)>| p.and_then(|(a, b)| Coord::from_e7(a.into(), b.into()));
        let stored = store.edits(from, to)?;
        let mut edits = Vec::with_capacity(stored.len());
        // The node positions each unplaced node or way edit needs, as (node id, edit) pairs:
        // sorted by node, they are looked up in id order, each node once, and summed into their
        // edits' centroids (BENCHMARKS.md, session 9).
        let mut wanted: Vec<(i64, usize)> = Vec::new();
        // Relations are few: their members are looked up through the cache, nodes first in id
        // order, after the ways.
        let mut relations: Vec<(usize, Vec<u8>)> = Vec::new();
        let mut relation_nodes = Vec::new();
        for e in stored {
            let at = edits.len();
            let pos = coord(e.pos);
            if pos.is_none() {
                let refs = match e.refs {
                    Some(r) => Some(r),
                    None if e.etype != ElementType::Node => index.stored_refs(e.etype, e.eid)?,
                    None => None,
                };
                match (e.etype, refs) {
                    (ElementType::Node, _) => wanted.push((e.eid, at)),
                    (ElementType::Way, Some(r)) => {
                        wanted.extend(unpack_refs(&r).map(|id| (id, at)));
                    }
                    (ElementType::Relation, Some(r)) => {
                        relation_nodes.extend(
                            unpack_refs(&r)
                                .take(MAX_MEMBERS_FOR_CENTROID)
                                .filter_map(member_decode)
                                .filter(|m| m.0 == ElementType::Node)
                                .map(|m| m.1),
                        );
                        relations.push((at, r));
                    }
                    _ => {}
                }
            }
            let (prev_tags, prev_version, prev_ts, prev_pos) = match e.prev {
                Some(p) => (Some(p.tags), Some(p.version), p.ts, coord(p.pos)),
                None => (None, None, None, None),
            };
            edits.push(Edit {
                etype: e.etype,
                eid: e.eid,
                version: e.version,
                op: e.op,
                changeset: e.changeset,
                uid: e.uid,
                user: e.user,
                ts: e.ts,
                pos,
                placed_by: if pos.is_some() {
                    PlacedBy::Own
                } else {
                    PlacedBy::Unplaced
                },
                tags: e.tags,
                prev_tags,
                prev_version,
                prev_ts,
                prev_pos,
            });
        }
        let mut sums = vec![Centroid::default(); edits.len()];
        wanted.sort_unstable();
        for named in wanted.chunk_by(|a, b| a.0 == b.0) {
            if let Some(n) = index.nodes.get(named[0].0)? {
                for &(_, at) in named {
                    sums[at].add(n.coord);
                }
            }
        }
        drop(wanted);
        index.prefetch(relation_nodes)?;
        let mut relations = relations.into_iter().peekable();
        let mut pending = Vec::new();
        for (i, (e, sum)) in edits.iter_mut().zip(&sums).enumerate() {
            if e.pos.is_some() {
                continue;
            }
            let c = match e.etype {
                ElementType::Node => sum.get().or(e.prev_pos),
                ElementType::Way => sum.get(),
                ElementType::Relation => match relations.next_if(|r| r.0 == i) {
                    Some((_, r)) => index.relation_centroid(&r)?,
                    None => None,
                },
            };
            if let Some(c) = c {
                e.pos = Some(c);
                e.placed_by = PlacedBy::NodeIndex;
            } else {
                pending.push(i);
            }
        }
        let mut ids: Vec<i64> = edits.iter().map(|e| e.changeset).collect();
        ids.sort_unstable();
        ids.dedup();
        let metas = load_changesets(store, ids)?;
        for i in pending {
            let e = &mut edits[i];
            if let Some((lo, hi)) = metas.get(&e.changeset).and_then(|m| m.bbox) {
                e.pos = Coord::from_e7(
                    (i64::from(lo.lat_e7()) + i64::from(hi.lat_e7())) / 2,
                    (i64::from(lo.lon_e7()) + i64::from(hi.lon_e7())) / 2,
                );
                e.placed_by = PlacedBy::ChangesetBox;
            }
        }
        Ok((edits, metas))
    }
}

/// Adds one edit's placement to the counts.
pub fn count_placement(p: &mut Placement, by: PlacedBy) {
    match by {
        PlacedBy::Own => p.own_coordinates += 1,
        PlacedBy::NodeIndex => p.node_index += 1,
        PlacedBy::ChangesetBox => p.changeset_bbox += 1,
        PlacedBy::Unplaced => p.unplaced += 1,
    }
}
