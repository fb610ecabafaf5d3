//! Tile pyramid tests: tile maths against the slippy-map reference, TileJSON's required fields,
//! decoded pixels of a known cell, empty tiles not written, MBTiles row flipping, the
//! antimeridian and high latitudes, the tile-count cap, and deterministic output.

use std::path::{Path, PathBuf};

use h3o::{CellIndex, LatLng, Resolution};
use hexvigil::land::Land;
use hexvigil::progress::Progress;
use hexvigil::render::{mercator_x, mercator_y, Colormap, HeatCell, Scale, Style};
use hexvigil::tiles::{write_pyramid, Pyramid, TileError, TileId, TileSummary, ZoomRange};
use serde_json::Value;

/// Per-channel tolerance on decoded tile pixels: 8-bit premultiplied blending and
/// un-premultiplying for PNG round at each step.
const PIXEL_TOLERANCE: i32 = 3;

fn cell(lat: f64, lon: f64, res: Resolution) -> CellIndex {
    LatLng::new(lat, lon).unwrap().to_cell(res)
}

fn style() -> &'static Style {
    static STYLE: std::sync::OnceLock<Style> = std::sync::OnceLock::new();
    STYLE.get_or_init(Style::default)
}

/// A pyramid of `cells` with the default style, viridis, a linear scale up to 100.
fn pyramid<'a>(
    cells: &'a [HeatCell],
    outlined: &'a [CellIndex],
    zooms: ZoomRange,
    land: &'a Land,
) -> Pyramid<'a> {
    Pyramid {
        cells,
        outlined,
        style: style(),
        colormap: Colormap::Viridis,
        scale: Scale::Linear,
        value_max: Some(100.0),
        zooms,
        max_tiles: 10_000,
        name: "Test tiles",
        description: "cells of a test",
        legend_label: "edits per cell in the week",
        base_url: None,
        mbtiles: None,
        land,
        roads: &[],
    }
}

fn write(p: &Pyramid<'_>, out: &Path) -> TileSummary {
    write_pyramid(p, out, &Progress::new(true)).unwrap()
}

fn tile_files(out: &Path) -> Vec<PathBuf> {
    let mut files = Vec::new();
    let mut stack = vec![out.to_owned()];
    while let Some(dir) = stack.pop() {
        for e in std::fs::read_dir(&dir).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                stack.push(p);
            } else if p.extension().is_some_and(|x| x == "png") {
                files.push(p);
            }
        }
    }
    files.sort();
    files
}

#[test]
fn tile_maths_match_the_slippy_map_reference() {
    // Source: tests/reference/tiles.csv, written by scripts/mercator_reference.py with
    // `mercantile` (tile, bounds, ul), which implements the OSM wiki "Slippy map tilenames"
    // formulas; tms_y is the MBTiles 1.3 flip 2^z - 1 - y.
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/reference/tiles.csv");
    let mut reader = csv::Reader::from_path(path).unwrap();
    let mut rows = 0;
    for row in reader.records() {
        let row = row.unwrap();
        let f = |i: usize| row[i].parse::<f64>().unwrap();
        let (lon, lat) = (f(0), f(1));
        let z: u8 = row[2].parse().unwrap();
        let want = TileId {
            z,
            x: row[3].parse().unwrap(),
            y: row[4].parse().unwrap(),
        };
        let got = TileId::containing(lon, lat, z).unwrap();
        assert_eq!(got, want, "tile of {lon},{lat} at zoom {z}");
        let b = got.bounds();
        for (i, (g, w)) in b.iter().zip([f(5), f(6), f(7), f(8)]).enumerate() {
            assert!((g - w).abs() < 1e-9, "edge {i} of {got}: {g} vs {w}");
        }
        assert_eq!(
            got.tms_row(),
            row[9].parse::<u64>().unwrap(),
            "TMS row of {got}"
        );
        // The north-west corner is the west and north edge.
        assert!((b[0] - f(10)).abs() < 1e-9 && (b[3] - f(11)).abs() < 1e-9);
        rows += 1;
    }
    assert!(rows >= 100, "{rows} reference rows");
}

#[test]
fn tilejson_has_the_required_fields() {
    let dir = tempfile::tempdir().unwrap();
    let c = cell(45.2, -33.6, Resolution::Eight);
    let cells = [HeatCell {
        cell: c,
        value: 50.0,
    }];
    let land = Land::empty();
    let zooms = ZoomRange { min: 9, max: 13 };
    let s = write(&pyramid(&cells, &[], zooms, &land), dir.path());
    let json: Value =
        serde_json::from_str(&std::fs::read_to_string(dir.path().join("tiles.json")).unwrap())
            .unwrap();
    // Source: TileJSON 3.0.0 specification, sections 3.1 (tilejson, required, semver string),
    // 3.2 (tiles, required, non-empty array of absolute URLs), 3.5 (bounds: left, bottom, right,
    // top, within ±180/±90, no wrap), 3.6 (center: lon, lat in bounds, whole zoom between
    // minzoom and maxzoom), 3.12/3.13 (0 <= minzoom <= maxzoom <= 30).
    assert_eq!(json["tilejson"], "3.0.0");
    let tiles = json["tiles"].as_array().unwrap();
    assert!(!tiles.is_empty());
    for t in tiles {
        let t = t.as_str().unwrap();
        assert!(t.starts_with("file:///"), "absolute: {t}");
        assert!(t.ends_with("/{z}/{x}/{y}.png"), "{t}");
    }
    let b: Vec<f64> = json["bounds"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_f64().unwrap())
        .collect();
    assert_eq!(b.len(), 4);
    assert!(-180.0 <= b[0] && b[0] <= b[2] && b[2] <= 180.0, "{b:?}");
    assert!(-90.0 <= b[1] && b[1] <= b[3] && b[3] <= 90.0, "{b:?}");
    let centre = LatLng::from(c);
    assert!(
        b[0] < centre.lng() && centre.lng() < b[2] && b[1] < centre.lat() && centre.lat() < b[3]
    );
    let (min, max) = (
        json["minzoom"].as_u64().unwrap(),
        json["maxzoom"].as_u64().unwrap(),
    );
    assert_eq!((min, max), (9, 13));
    let center = json["center"].as_array().unwrap();
    assert_eq!(center.len(), 3);
    let (lon, lat) = (center[0].as_f64().unwrap(), center[1].as_f64().unwrap());
    assert!(b[0] <= lon && lon <= b[2] && b[1] <= lat && lat <= b[3]);
    let zoom = center[2].as_u64().expect("a whole zoom");
    assert!((min..=max).contains(&zoom));
    assert_eq!(json["attribution"], "© OpenStreetMap contributors");
    assert_eq!(s.tilejson.tiles.len(), 1);

    // A served pyramid: --base-url must be absolute.
    let mut p = pyramid(&cells, &[], zooms, &land);
    p.base_url = Some("https://maps.example.org/hexvigil/");
    let s = write(&p, dir.path());
    assert_eq!(
        s.tilejson.tiles,
        vec!["https://maps.example.org/hexvigil/{z}/{x}/{y}.png"]
    );
    p.base_url = Some("tiles/");
    assert!(matches!(
        write_pyramid(&p, dir.path(), &Progress::new(true)),
        Err(TileError::BaseUrl { .. })
    ));
}

#[test]
fn a_known_cell_renders_at_its_pixels() {
    let dir = tempfile::tempdir().unwrap();
    let res = Resolution::Eight;
    let c = cell(45.2, -33.6, res);
    let cells = [HeatCell {
        cell: c,
        value: 50.0,
    }];
    let land = Land::empty();
    let z = 14;
    let s = write(
        &pyramid(&cells, &[], ZoomRange { min: z, max: z }, &land),
        dir.path(),
    );
    let centre = LatLng::from(c);
    let tile = TileId::containing(centre.lng(), centre.lat(), z).unwrap();
    let png = dir.path().join(tile.path());
    assert!(png.is_file(), "{} written", tile.path());
    let img = image::open(&png).unwrap().to_rgba8();
    assert_eq!((img.width(), img.height()), (256, 256));
    // The cell centre's pixel inside its tile (slippy-map pixel maths).
    let n = f64::from(1u32 << z);
    let px = ((mercator_x(centre.lng()) * n - f64::from(tile.x)) * 256.0).floor() as u32;
    let py = ((mercator_y(centre.lat()) * n - f64::from(tile.y)) * 256.0).floor() as u32;
    let got = img.get_pixel(px, py).0;
    let want = Colormap::Viridis.rgb(0.5);
    let alpha = (style().cells.opacity * 255.0).round() as i32;
    for i in 0..3 {
        assert!(
            (i32::from(got[i]) - i32::from(want[i])).abs() <= PIXEL_TOLERANCE,
            "colour at the cell centre: got {got:?}, want {want:?}"
        );
    }
    assert!(
        (i32::from(got[3]) - alpha).abs() <= PIXEL_TOLERANCE,
        "alpha {}",
        got[3]
    );
    // Every pixel away from the cell (beyond its outline) is transparent: the cell's
    // boundary vertices give its pixel box.
    let corners: Vec<(f64, f64)> = c
        .boundary()
        .iter()
        .map(|ll| {
            (
                (mercator_x(ll.lng()) * n - f64::from(tile.x)) * 256.0,
                (mercator_y(ll.lat()) * n - f64::from(tile.y)) * 256.0,
            )
        })
        .collect();
    let (x0, x1) = corners
        .iter()
        .fold((f64::MAX, f64::MIN), |a, p| (a.0.min(p.0), a.1.max(p.0)));
    let (y0, y1) = corners
        .iter()
        .fold((f64::MAX, f64::MIN), |a, p| (a.0.min(p.1), a.1.max(p.1)));
    let mut inside = 0;
    for (x, y, p) in img.enumerate_pixels() {
        let (fx, fy) = (f64::from(x) + 0.5, f64::from(y) + 0.5);
        let near = fx > x0 - 2.0 && fx < x1 + 2.0 && fy > y0 - 2.0 && fy < y1 + 2.0;
        if near {
            inside += usize::from(p.0[3] > 0);
        } else {
            assert_eq!(p.0[3], 0, "pixel {x},{y} away from the cell is transparent");
        }
    }
    assert!(
        inside > 100,
        "the cell covers many pixels at zoom {z} ({inside})"
    );

    // Only tiles with something drawn exist, and the summary counts them.
    let files = tile_files(dir.path());
    assert_eq!(files.len() as u64, s.written);
    for f in &files {
        let img = image::open(f).unwrap().to_rgba8();
        assert!(img.pixels().any(|p| p.0[3] > 0), "{} has data", f.display());
    }
    let far = TileId {
        z,
        x: tile.x + 3,
        y: tile.y,
    };
    assert!(
        !dir.path().join(far.path()).exists(),
        "no tile without data"
    );
}

#[test]
fn a_week_without_values_writes_no_tiles() {
    let dir = tempfile::tempdir().unwrap();
    let cells = [HeatCell {
        cell: cell(45.2, -33.6, Resolution::Eight),
        value: 0.0,
    }];
    let land = Land::empty();
    let s = write(
        &pyramid(&cells, &[], ZoomRange { min: 8, max: 12 }, &land),
        dir.path(),
    );
    assert_eq!(s.written, 0);
    assert!(tile_files(dir.path()).is_empty());
    assert!(dir.path().join("tiles.json").is_file());
    let page = std::fs::read_to_string(dir.path().join("viewer.html")).unwrap();
    assert!(page.contains("the pyramid is empty"));
}

#[test]
fn mbtiles_rows_are_flipped_tms_rows_of_the_files() {
    let dir = tempfile::tempdir().unwrap();
    let res = Resolution::Seven;
    let cells: Vec<HeatCell> = cell(45.2, -33.6, res)
        .grid_disk::<Vec<_>>(2)
        .into_iter()
        .enumerate()
        .map(|(i, c)| HeatCell {
            cell: c,
            value: 5.0 + i as f64,
        })
        .collect();
    let land = Land::empty();
    let mb = dir.path().join("heat.mbtiles");
    let mut p = pyramid(&cells, &[], ZoomRange { min: 8, max: 12 }, &land);
    p.mbtiles = Some(&mb);
    let out = dir.path().join("pyramid");
    let s = write(&p, &out);
    let conn = rusqlite::Connection::open(&mb).unwrap();
    // Source: MBTiles 1.3 specification: metadata needs `name` and `format`; tile_row is
    // 2^zoom - 1 - y (its example: 11/327/791 is stored as row 1256).
    let meta = |k: &str| -> String {
        conn.query_row("SELECT value FROM metadata WHERE name = ?1", [k], |r| {
            r.get(0)
        })
        .unwrap()
    };
    assert_eq!(meta("format"), "png");
    assert_eq!(meta("name"), "Test tiles");
    assert_eq!(meta("minzoom"), "8");
    assert_eq!(meta("maxzoom"), "12");
    assert_eq!(meta("bounds").split(',').count(), 4);
    let mut st = conn
        .prepare("SELECT zoom_level, tile_column, tile_row, tile_data FROM tiles")
        .unwrap();
    let rows: Vec<(u8, u32, u64, Vec<u8>)> = st
        .query_map([], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?)))
        .unwrap()
        .map(Result::unwrap)
        .collect();
    assert_eq!(rows.len() as u64, s.written);
    assert!(s.written > 10);
    for (z, x, tms, data) in rows {
        let y = (1u64 << z) - 1 - tms;
        let file = out.join(format!("{z}/{x}/{y}.png"));
        assert_eq!(
            std::fs::read(&file).unwrap(),
            data,
            "row {z}/{x}/{tms} is {}",
            file.display()
        );
    }
    assert!(!dir.path().join("heat.mbtiles.partial").exists());
}

#[test]
fn antimeridian_and_high_latitude_cells_do_not_break() {
    let dir = tempfile::tempdir().unwrap();
    let straddler = cell(-16.5, 179.99, Resolution::Five);
    let north = cell(84.9, 25.0, Resolution::Five);
    let beyond = cell(89.5, 10.0, Resolution::Five);
    let cells: Vec<HeatCell> = [straddler, north, beyond]
        .into_iter()
        .map(|c| HeatCell {
            cell: c,
            value: 80.0,
        })
        .collect();
    let land = Land::empty();
    let z = 6;
    write(
        &pyramid(&cells, &[straddler], ZoomRange { min: z, max: z }, &land),
        dir.path(),
    );
    let n = 1u32 << z;
    let written: Vec<TileId> = tile_files(dir.path())
        .iter()
        .map(|f| {
            let rel = f.strip_prefix(dir.path()).unwrap().with_extension("");
            let parts: Vec<u32> = rel
                .iter()
                .map(|p| p.to_str().unwrap().parse().unwrap())
                .collect();
            TileId {
                z: parts[0] as u8,
                x: parts[1],
                y: parts[2],
            }
        })
        .collect();
    // The antimeridian cell is drawn at both edges of the world and nowhere in between.
    let row = TileId::containing(179.99, -16.5, z).unwrap().y;
    let on_row: Vec<u32> = written.iter().filter(|t| t.y == row).map(|t| t.x).collect();
    assert!(
        on_row.contains(&0) && on_row.contains(&(n - 1)),
        "{on_row:?}"
    );
    assert!(on_row.iter().all(|&x| x == 0 || x == n - 1), "{on_row:?}");
    // The east-edge tile shows the cell at its right edge and nothing at its left.
    let east = image::open(dir.path().join(format!("{z}/{}/{row}.png", n - 1)))
        .unwrap()
        .to_rgba8();
    let y = ((mercator_y(-16.5) * f64::from(n) - f64::from(row)) * 256.0) as u32;
    assert!(east.get_pixel(255, y).0[3] > 0);
    assert_eq!(east.get_pixel(10, y).0[3], 0, "no smear across the tile");
    // A cell near the Web Mercator limit lands in the top row; one beyond it draws nothing.
    assert!(written
        .iter()
        .any(|t| t.y == 0 && t.x == TileId::containing(25.0, 84.9, z).unwrap().x));
    let beyond_x = TileId::containing(10.0, 89.5, z).unwrap().x;
    assert!(
        !written.iter().any(|t| t.y == 0 && t.x == beyond_x),
        "a cell beyond 85.05° has no Mercator area"
    );
}

#[test]
fn too_many_tiles_are_refused_before_drawing() {
    let dir = tempfile::tempdir().unwrap();
    let cells = [HeatCell {
        cell: cell(45.2, -33.6, Resolution::Five),
        value: 10.0,
    }];
    let land = Land::empty();
    let mut p = pyramid(&cells, &[], ZoomRange { min: 6, max: 18 }, &land);
    p.max_tiles = 500;
    let out = dir.path().join("never");
    let e = write_pyramid(&p, &out, &Progress::new(true)).unwrap_err();
    assert!(matches!(e, TileError::TooMany { max: 500, .. }), "{e}");
    assert!(e.to_string().contains("--zoom"), "{e}");
    assert!(!out.exists(), "nothing written");
}

#[test]
fn tiles_are_deterministic() {
    let dir = tempfile::tempdir().unwrap();
    let cells: Vec<HeatCell> = cell(45.2, -33.6, Resolution::Eight)
        .grid_disk::<Vec<_>>(4)
        .into_iter()
        .enumerate()
        .map(|(i, c)| HeatCell {
            cell: c,
            value: (i % 13) as f64,
        })
        .collect();
    let outlined = [cells[0].cell];
    let land = Land::empty();
    let p = pyramid(&cells, &outlined, ZoomRange { min: 10, max: 14 }, &land);
    let (a, b) = (dir.path().join("a"), dir.path().join("b"));
    write(&p, &a);
    write(&p, &b);
    let (fa, fb) = (tile_files(&a), tile_files(&b));
    assert_eq!(fa.len(), fb.len());
    for (x, y) in fa.iter().zip(&fb) {
        assert_eq!(x.strip_prefix(&a).unwrap(), y.strip_prefix(&b).unwrap());
        assert_eq!(std::fs::read(x).unwrap(), std::fs::read(y).unwrap());
    }
    // A second run into the same folder replaces the old zoom folders.
    let narrower = pyramid(&cells, &outlined, ZoomRange { min: 12, max: 12 }, &land);
    write(&narrower, &a);
    assert!(!a.join("10").exists() && a.join("12").is_dir());
}
