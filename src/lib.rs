//! hexvigil: reads a region's OpenStreetMap files, scores changesets for signs of vandalism,
//! buckets edits into H3 cells and ISO weeks, compares each cell's week with its own history
//! and its neighbours, and writes heat images and an HTML report ranking the outliers.
//!
//! One module per pipeline stage; see ARCHITECTURE.md for the data flow.
#![deny(clippy::unwrap_used, clippy::expect_used)]

pub mod geojson_io;
pub mod land;
pub mod model;
pub mod render;
pub mod summary;
pub mod ingest;
pub mod progress;
pub mod store;
pub mod report;
pub mod demo;
