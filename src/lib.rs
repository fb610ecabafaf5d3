//! hexvigil: reads a region's OpenStreetMap files, scores changesets for signs of vandalism,
//! buckets edits into H3 cells and ISO weeks, compares each cell's week with its own history
//! and its neighbours, and writes heat images and an HTML report ranking the outliers.
//!
//! One module per pipeline stage; see DEVELOPERS.md for the data flow.
#![deny(clippy::unwrap_used, clippy::expect_used)]
// Tests may unwrap: a panic there is a failed test, not a crash on input.
#![cfg_attr(test, allow(clippy::unwrap_used, clippy::expect_used))]

pub mod baseline;
pub mod cells;
pub mod cli;
pub mod demo;
pub mod detect;
pub mod element_state;
pub mod evaluate;
pub mod export;
pub mod features;
pub mod fit;
pub mod generations;
pub mod geojson_io;
pub mod ingest;
pub mod labels;
pub mod land;
pub mod locate;
pub mod measure;
pub mod model;
pub mod node_index;
pub mod pipeline;
pub mod progress;
pub mod regions;
pub mod render;
pub mod report;
pub mod roads;
pub mod score;
pub mod sorted_keys;
pub mod store;
pub mod summary;
pub mod tiles;
pub mod update;
