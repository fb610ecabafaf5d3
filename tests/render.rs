//! Heat image tests: colour map tables, Web Mercator helpers, and decoded pixels of rendered
//! images (cell colours, outlier outlines, land and water, size limits, empty input).
//!
//! Set `HEXVIGIL_RENDER_SAMPLE=/some/file.png` to also write the sample scene for a visual check.

use std::path::Path;

use geo::{polygon, Rect};
use h3o::{CellIndex, LatLng, Resolution};
use hexvigil::land::Land;
use hexvigil::model::Coord;
use hexvigil::render::{
    mercator_x, mercator_y, render_heat, save_png, Colormap, HeatCell, HeatMap, Layout,
    RenderError, Scale, Style, MAX_SIDE,
};

/// The default style, which every test image uses.
fn style() -> &'static Style {
    static STYLE: std::sync::OnceLock<Style> = std::sync::OnceLock::new();
    STYLE.get_or_init(Style::default)
}

/// Per-channel tolerance for fills: 8-bit premultiplied blending rounds at each step.
const FILL_TOLERANCE: i32 = 3;

fn cell(lat: f64, lon: f64, res: Resolution) -> CellIndex {
    LatLng::new(lat, lon).unwrap().to_cell(res)
}

/// A fictional coast: land to the north with a bay, and an offshore island.
fn coast() -> Land {
    let mainland = polygon![
        (x: 4.60, y: 43.60), (x: 5.30, y: 43.60), (x: 5.30, y: 43.40), (x: 5.16, y: 43.37),
        (x: 5.08, y: 43.39), (x: 5.02, y: 43.43), (x: 4.95, y: 43.41), (x: 4.90, y: 43.36),
        (x: 4.80, y: 43.37), (x: 4.72, y: 43.39), (x: 4.60, y: 43.38),
    ];
    let island = polygon![
        (x: 4.98, y: 43.325), (x: 5.03, y: 43.33), (x: 5.04, y: 43.315), (x: 5.00, y: 43.305),
        (x: 4.975, y: 43.31),
    ];
    Land::from_polygons(vec![mainland, island])
}

fn extent() -> Rect<f64> {
    Rect::new((4.70, 43.28), (5.20, 43.52))
}

fn decode(pixmap: &tiny_skia::Pixmap) -> image::RgbImage {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("heat.png");
    save_png(pixmap, &path).unwrap();
    image::open(&path).unwrap().to_rgb8()
}

fn pixel_at(img: &image::RgbImage, (x, y): (f64, f64)) -> [u8; 3] {
    img.get_pixel(x.floor() as u32, y.floor() as u32).0
}

/// Source-over of `rgb` at `alpha` on an opaque backdrop.
fn over(rgb: [u8; 3], alpha: f32, backdrop: [u8; 3]) -> [u8; 3] {
    let a = f64::from(alpha);
    std::array::from_fn(|i| {
        (f64::from(rgb[i]) * a + f64::from(backdrop[i]) * (1.0 - a)).round() as u8
    })
}

fn assert_close(got: [u8; 3], want: [u8; 3], tolerance: i32, what: &str) {
    let ok = got
        .iter()
        .zip(want)
        .all(|(g, w)| (i32::from(*g) - i32::from(w)).abs() <= tolerance);
    assert!(ok, "{what}: got {got:?}, want {want:?} ± {tolerance}");
}

fn heat<'a>(cells: &'a [HeatCell], outlined: &'a [CellIndex], land: &'a Land) -> HeatMap<'a> {
    HeatMap {
        title: "Velloran Coast: edits, 2026-W48",
        subtitle: "H3 resolution 8 · 1 842 edits · outlier cells outlined",
        legend_label: "edits per cell in the week",
        cells,
        outlined,
        land,
        roads: &[],
        extent: extent(),
        style: style(),
        colormap: Colormap::Viridis,
        scale: Scale::Linear,
        value_max: None,
        width: 1200,
    }
}

#[test]
fn colormap_endpoints_and_midpoint() {
    // Source: matplotlib `_cm_listed.py` tables (_viridis_data, _cividis_data, _magma_data)
    // and the lookup table of colormaps["RdBu_r"], entries 0, 128 and 255; hex strings from
    // matplotlib.colors.to_hex(colormaps[name](t)). The RdBu ends are ColorBrewer's own
    // (#053061 and #67001f on colorbrewer2.org, 11-class RdBu).
    type Published = (Colormap, [[f64; 3]; 3], [&'static str; 3]);
    let published: [Published; 4] = [
        (
            Colormap::RdBuR,
            [
                [0.0196078431372549, 0.18823529411764706, 0.3803921568627451],
                [0.9690888119953864, 0.9664744329104191, 0.9649365628604383],
                [0.403921568627451, 0.0, 0.12156862745098039],
            ],
            ["#053061", "#f7f6f6", "#67001f"],
        ),
        (
            Colormap::Viridis,
            [
                [0.267004, 0.004874, 0.329415],
                [0.127568, 0.566949, 0.550556],
                [0.993248, 0.906157, 0.143936],
            ],
            ["#440154", "#21918c", "#fde725"],
        ),
        (
            Colormap::Cividis,
            [
                [0.0, 0.135112, 0.304751],
                [0.488697, 0.485318, 0.471008],
                [0.995737, 0.909344, 0.217772],
            ],
            ["#00224e", "#7d7c78", "#fee838"],
        ),
        (
            Colormap::Magma,
            [
                [0.001462, 0.000466, 0.013866],
                [0.716387, 0.214982, 0.47529],
                [0.987053, 0.991438, 0.749504],
            ],
            ["#000004", "#b73779", "#fcfdbf"],
        ),
    ];
    for (map, entries, hexes) in published {
        let table = map.table();
        for (index, want) in [0, 128, 255].into_iter().zip(entries) {
            assert_eq!(table[index], want, "{map} entry {index}");
        }
        for (t, hex) in [0.0, 0.5, 1.0].into_iter().zip(hexes) {
            let [r, g, b] = map.rgb(t);
            assert_eq!(format!("#{r:02x}{g:02x}{b:02x}"), hex, "{map} at {t}");
        }
    }
}

#[test]
fn colormap_and_scale_names_parse() {
    assert_eq!("viridis".parse::<Colormap>().unwrap(), Colormap::Viridis);
    assert_eq!(" Magma ".parse::<Colormap>().unwrap(), Colormap::Magma);
    assert_eq!("cividis".parse::<Colormap>().unwrap(), Colormap::Cividis);
    assert!("jet".parse::<Colormap>().is_err());
    assert_eq!("rdbu_r".parse::<Colormap>().unwrap(), Colormap::RdBuR);
    assert!(Colormap::RdBuR.is_diverging() && !Colormap::Viridis.is_diverging());
    assert_eq!("ratio".parse::<Scale>().unwrap(), Scale::Ratio);
    assert_eq!("log".parse::<Scale>().unwrap(), Scale::Log);
    assert!("sqrt".parse::<Scale>().is_err());
}

#[test]
fn log_scale_is_log1p() {
    // Common practice, no source: log1p maps 0 to 0 and the maximum to 1.
    assert_eq!(Scale::Log.position(0.0, 1000.0), 0.0);
    assert!((Scale::Log.position(1000.0, 1000.0) - 1.0).abs() < 1e-12);
    let want = 2f64.ln() / 1001f64.ln();
    assert!((Scale::Log.position(1.0, 1000.0) - want).abs() < 1e-12);
    assert_eq!(Scale::Linear.position(f64::NAN, 10.0), 0.0);
    assert_eq!(Scale::Linear.position(20.0, 10.0), 1.0);
    // Common practice, no source: a ratio scale is symmetric in log space around 1.
    assert!((Scale::Ratio.position(1.0, 8.0) - 0.5).abs() < 1e-12);
    assert!((Scale::Ratio.position(8.0, 8.0) - 1.0).abs() < 1e-12);
    assert!(Scale::Ratio.position(1.0 / 8.0, 8.0).abs() < 1e-12);
    assert!(
        (Scale::Ratio.position(2.0, 8.0) + Scale::Ratio.position(0.5, 8.0) - 1.0).abs() < 1e-12
    );
    assert_eq!(Scale::Ratio.position(4.0, 1.0), 0.0);
}

#[test]
fn mercator_matches_slippy_map_reference() {
    // Source: tests/reference/mercator.csv, written by scripts/mercator_reference.py with the
    // `mercantile` package, which implements the OSM wiki "Slippy map tilenames" formulas.
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/reference/mercator.csv");
    let mut reader = csv::Reader::from_path(path).unwrap();
    let mut rows = 0;
    for row in reader.records() {
        let row = row.unwrap();
        let f = |i: usize| row[i].parse::<f64>().unwrap();
        let (lon, lat, x, y) = (f(0), f(1), f(2), f(3));
        let zoom: i32 = row[4].parse().unwrap();
        let (tile_x, tile_y): (f64, f64) = (f(5), f(6));
        assert!((mercator_x(lon) - x).abs() < 1e-9, "x of {lon},{lat}");
        assert!((mercator_y(lat) - y).abs() < 1e-9, "y of {lon},{lat}");
        let n = 2f64.powi(zoom);
        assert_eq!(
            (mercator_x(lon) * n).floor().min(n - 1.0),
            tile_x,
            "tile x of {lon},{lat}"
        );
        assert_eq!(
            (mercator_y(lat) * n).floor().min(n - 1.0),
            tile_y,
            "tile y of {lon},{lat}"
        );
        rows += 1;
    }
    assert!(rows >= 10);
}

#[test]
fn cell_centres_have_the_colour_map_colour() {
    let land = coast();
    let res = Resolution::Eight;
    // One cell on land, one in open water, one on land with a high value.
    let spots = [
        (43.47, 4.80, 10.0),
        (43.31, 4.85, 50.0),
        (43.50, 5.10, 90.0),
    ];
    let cells: Vec<HeatCell> = spots
        .iter()
        .map(|&(lat, lon, value)| HeatCell {
            cell: cell(lat, lon, res),
            value,
        })
        .collect();
    // Linear scale. Without value_max the top is 90 rounded up to a whole number of steps (100);
    // with value_max it is that value.
    for (value_max, top) in [(None, 100.0), (Some(200.0), 200.0)] {
        let mut map = heat(&cells, &[], &land);
        map.value_max = value_max;
        assert_eq!(map.scale_max(), top);
        let img = decode(&render_heat(&map).unwrap());
        let layout = Layout::new(map.extent, map.width).unwrap();
        assert_eq!((img.width(), img.height()), (layout.width, layout.height));
        for c in &cells {
            let centre = LatLng::from(c.cell);
            let on_land = land.is_land(Coord::from_degrees(centre.lat(), centre.lng()).unwrap());
            let backdrop = if on_land {
                style().colours.land.0
            } else {
                style().colours.water.0
            };
            let want = over(
                Colormap::Viridis.rgb(c.value / top),
                style().cells.opacity,
                backdrop,
            );
            let got = pixel_at(&img, layout.map.to_pixel(centre.lng(), centre.lat()));
            assert_close(
                got,
                want,
                FILL_TOLERANCE,
                &format!("centre of cell {}", c.cell),
            );
        }
    }
}

#[test]
fn outlier_boundary_has_the_outline_colour() {
    let land = coast();
    let hot = cell(43.47, 4.95, Resolution::Eight);
    let cells = [HeatCell {
        cell: hot,
        value: 60.0,
    }];
    let outlined = [hot];
    let map = heat(&cells, &outlined, &land);
    let img = decode(&render_heat(&map).unwrap());
    let layout = Layout::new(map.extent, map.width).unwrap();
    let corners: Vec<(f64, f64)> = hot
        .boundary()
        .iter()
        .map(|ll| layout.map.to_pixel(ll.lng(), ll.lat()))
        .collect();
    assert_eq!(corners.len(), 6);
    for (i, a) in corners.iter().enumerate() {
        let b = corners[(i + 1) % corners.len()];
        let mid = ((a.0 + b.0) / 2.0, (a.1 + b.1) / 2.0);
        // The core stroke is 3 px wide at 1200 px, so it covers the pixel under the edge.
        assert_close(
            pixel_at(&img, mid),
            style().outliers.colour.0,
            12,
            &format!("edge {i} midpoint"),
        );
    }
}

#[test]
fn pixels_away_from_cells_show_land_or_water() {
    let land = coast();
    let cells = [HeatCell {
        cell: cell(43.47, 4.95, Resolution::Eight),
        value: 60.0,
    }];
    let map = heat(&cells, &[], &land);
    let img = decode(&render_heat(&map).unwrap());
    let layout = Layout::new(map.extent, map.width).unwrap();
    for (lon, lat) in [
        (4.75, 43.50),
        (5.15, 43.45),
        (4.80, 43.30),
        (5.15, 43.30),
        (5.01, 43.318),
    ] {
        let on_land = land.is_land(Coord::from_degrees(lat, lon).unwrap());
        let want = if on_land {
            style().colours.land.0
        } else {
            style().colours.water.0
        };
        let got = pixel_at(&img, layout.map.to_pixel(lon, lat));
        assert_close(
            got,
            want,
            1,
            &format!("backdrop at {lon},{lat} (land: {on_land})"),
        );
    }

    // Without a land layer the map is one plain colour.
    let none = Land::empty();
    let map = heat(&cells, &[], &none);
    let img = decode(&render_heat(&map).unwrap());
    for (lon, lat) in [(4.75, 43.50), (4.80, 43.30)] {
        let got = pixel_at(&img, layout.map.to_pixel(lon, lat));
        assert_close(got, style().colours.plain.0, 1, "plain backdrop");
    }
}

#[test]
fn oversized_or_degenerate_images_are_refused() {
    let land = Land::empty();
    let mut map = heat(&[], &[], &land);
    map.width = MAX_SIDE + 1;
    assert!(matches!(
        render_heat(&map),
        Err(RenderError::TooLarge { .. })
    ));

    // A tall extent at the largest width: the derived height passes the limit.
    map.width = MAX_SIDE;
    map.extent = Rect::new((10.0, -60.0), (11.0, 60.0));
    assert!(matches!(
        render_heat(&map),
        Err(RenderError::TooLarge { .. })
    ));

    map.width = 100;
    map.extent = extent();
    assert!(matches!(
        render_heat(&map),
        Err(RenderError::TooNarrow { .. })
    ));

    map.width = 800;
    map.extent = Rect::new((4.7, 43.3), (4.7, 43.5));
    assert!(matches!(render_heat(&map), Err(RenderError::Extent { .. })));
    map.extent = Rect::new((f64::NAN, 43.3), (5.0, 43.5));
    assert!(matches!(render_heat(&map), Err(RenderError::Extent { .. })));
    map.extent = Rect::new((170.0, 43.3), (190.0, 43.5));
    assert!(matches!(render_heat(&map), Err(RenderError::Extent { .. })));
}

#[test]
fn empty_cell_list_renders_backdrop_and_legend() {
    let land = coast();
    let map = heat(&[], &[], &land);
    let img = decode(&render_heat(&map).unwrap());
    let layout = Layout::new(map.extent, map.width).unwrap();
    let got = pixel_at(&img, layout.map.to_pixel(4.75, 43.50));
    assert_close(got, style().colours.land.0, 1, "land with no cells");

    // The colour bar sits below the map: both ends of the colour map appear there.
    let below = (layout.map.top + layout.map.height) as u32;
    let footer: Vec<[u8; 3]> = (below..img.height())
        .flat_map(|y| (0..img.width()).map(move |x| (x, y)))
        .map(|(x, y)| img.get_pixel(x, y).0)
        .collect();
    for t in [0.01, 0.5, 0.99] {
        let want = Colormap::Viridis.rgb(t);
        let hits = footer.iter().filter(|p| **p == want).count();
        assert!(hits >= 6, "colour bar shows viridis at {t} ({hits} pixels)");
    }
    // Title text: dark pixels in the header.
    let ink = (0..layout.map.top as u32)
        .flat_map(|y| (0..img.width()).map(move |x| (x, y)))
        .filter(|&(x, y)| img.get_pixel(x, y).0.iter().all(|c| *c < 80))
        .count();
    assert!(ink > 500, "title is drawn ({ink} dark pixels)");
}

#[test]
fn antimeridian_cells_do_not_smear() {
    let land = Land::empty();
    // A resolution-5 cell straddling 180°: it shows at the east edge of a map ending at 180°
    // and at the west edge of one starting at -180°, and nowhere in between.
    let straddler = cell(-16.5, 179.99, Resolution::Five);
    let lons: Vec<f64> = straddler.boundary().iter().map(|ll| ll.lng()).collect();
    assert!(
        lons.iter().any(|l| *l > 0.0) && lons.iter().any(|l| *l < 0.0),
        "crosses 180°"
    );
    let cells = [HeatCell {
        cell: straddler,
        value: 100.0,
    }];
    let filled = over(
        Colormap::Viridis.rgb(1.0),
        style().cells.opacity,
        style().colours.plain.0,
    );
    for (extent, inside_lon, far_lon) in [
        (Rect::new((179.0, -17.0), (180.0, -16.0)), 179.97, 179.3),
        (Rect::new((-180.0, -17.0), (-179.0, -16.0)), -179.97, -179.3),
    ] {
        let mut map = heat(&cells, &[], &land);
        map.extent = extent;
        map.width = 800;
        let img = decode(&render_heat(&map).unwrap());
        let layout = Layout::new(extent, 800).unwrap();
        let near = pixel_at(&img, layout.map.to_pixel(inside_lon, -16.5));
        assert_close(near, filled, FILL_TOLERANCE, "cell at the map edge");
        let far = pixel_at(&img, layout.map.to_pixel(far_lon, -16.5));
        assert_close(far, style().colours.plain.0, 1, "no smear across the map");
    }
}

#[test]
fn roads_are_drawn_under_the_cells_and_styles_change_the_look() {
    let land = coast();
    // A road across the mainland, away from any cell.
    let roads = vec![vec![(4.72, 43.50), (4.90, 43.50)]];
    // Wide enough that the pixel on the line is fully covered.
    let mut wide = Style::default();
    wide.roads.width = 6.0;
    let mut map = heat(&[], &[], &land);
    map.roads = &roads;
    map.style = &wide;
    let img = decode(&render_heat(&map).unwrap());
    let layout = Layout::new(map.extent, map.width).unwrap();
    let on_road = pixel_at(&img, layout.map.to_pixel(4.80, 43.50));
    let r = &wide.roads;
    let want = over(r.colour.0, r.opacity, wide.colours.land.0);
    assert_close(on_road, want, 12, "road pixel");
    let off_road = pixel_at(&img, layout.map.to_pixel(4.80, 43.47));
    assert_close(off_road, style().colours.land.0, 1, "land beside the road");

    // The dark style: its own land and paper colours, and no roads when a style hides them.
    let mut dark = Style::load("dark").unwrap();
    dark.roads.show = false;
    map.style = &dark;
    let img = decode(&render_heat(&map).unwrap());
    let on_road = pixel_at(&img, layout.map.to_pixel(4.80, 43.50));
    assert_close(on_road, dark.colours.land.0, 1, "dark land, roads hidden");
    assert_close(img.get_pixel(2, 2).0, dark.colours.paper.0, 0, "dark paper");
}

#[test]
fn rendering_is_deterministic() {
    let land = coast();
    let (cells, outlined) = sample_scene(&land);
    let mut map = heat(&cells, &outlined, &land);
    map.scale = Scale::Log;
    let a = render_heat(&map).unwrap();
    let b = render_heat(&map).unwrap();
    assert_eq!(a.data(), b.data());
    if let Some(path) = std::env::var_os("HEXVIGIL_RENDER_SAMPLE") {
        save_png(&a, Path::new(&path)).unwrap();
    }
}

/// A busy week on the fictional coast: a town hotspot, a second cluster, a quiet background,
/// and a few offshore cells; outliers at the hotspot and offshore.
fn sample_scene(land: &Land) -> (Vec<HeatCell>, Vec<CellIndex>) {
    let res = Resolution::Eight;
    let town = cell(43.45, 4.98, res);
    let village = cell(43.49, 5.12, res);
    let mut cells = Vec::new();
    for c in town.grid_disk::<Vec<_>>(26) {
        let ll = LatLng::from(c);
        let coord = Coord::from_degrees(ll.lat(), ll.lng()).unwrap();
        if !land.is_land(coord) {
            continue;
        }
        let d_town = f64::from(c.grid_distance(town).unwrap_or(99));
        let d_village = f64::from(c.grid_distance(village).unwrap_or(99));
        // Deterministic jitter from the cell index.
        let jitter = (u64::from(c) >> 12) % 7;
        let value = 900.0 * (-d_town * d_town / 40.0).exp()
            + 120.0 * (-d_village * d_village / 12.0).exp()
            + 2.0 * jitter as f64
            - 4.0;
        if value >= 1.0 {
            cells.push(HeatCell {
                cell: c,
                value: value.round(),
            });
        }
    }
    let offshore = [cell(43.33, 4.86, res), cell(43.335, 4.87, res)];
    for c in offshore {
        cells.push(HeatCell {
            cell: c,
            value: 35.0,
        });
    }
    let outlined = vec![town, cell(43.455, 4.99, res), offshore[0], offshore[1]];
    (cells, outlined)
}
