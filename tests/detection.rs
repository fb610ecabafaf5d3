//! Detection quality on the demo scenario, through the library: the injected incidents are
//! found at several resolutions, and ordinary weeks raise few false outliers.

use std::collections::HashSet;
use std::sync::OnceLock;

use hexvigil::demo::{generate, DemoOptions, Incidents};
use hexvigil::land::LandSource;
use hexvigil::model::IsoWeek;
use hexvigil::pipeline::{analyse, ReportOptions};
use hexvigil::progress::Progress;
use hexvigil::store::Store;

struct Demo {
    _dir: tempfile::TempDir,
    db: std::path::PathBuf,
    land: std::path::PathBuf,
    regions: std::path::PathBuf,
    incidents: Incidents,
}

fn demo() -> &'static Demo {
    static D: OnceLock<Demo> = OnceLock::new();
    D.get_or_init(|| {
        let dir = tempfile::tempdir().unwrap();
        let files = generate(&dir.path().join("input"), &DemoOptions::default()).unwrap();
        let db = dir.path().join("state.db");
        let mut store = Store::open(&db).unwrap();
        let mut inputs = vec![files.snapshot.clone(), files.changesets.clone()];
        inputs.extend(files.diffs.iter().cloned());
        hexvigil::ingest::ingest(&mut store, &inputs, &Progress::silent()).unwrap();
        let incidents: Incidents =
            serde_json::from_str(&std::fs::read_to_string(&files.incidents).unwrap()).unwrap();
        Demo {
            _dir: dir,
            db,
            land: files.land,
            regions: files.regions,
            incidents,
        }
    })
}

fn run(week: &str, resolution: Option<h3o::Resolution>) -> hexvigil::summary::Summary {
    let d = demo();
    let store = Store::open(&d.db).unwrap();
    let opts = ReportOptions {
        week: IsoWeek::parse(week),
        resolution,
        land: LandSource::File(d.land.clone()),
        regions: Some(d.regions.clone()),
        ..ReportOptions::default()
    };
    analyse(&store, &opts, &Progress::silent()).unwrap().summary
}

#[test]
fn incidents_found_at_resolutions_7_8_9() {
    let d = demo();
    for res in [
        h3o::Resolution::Seven,
        h3o::Resolution::Eight,
        h3o::Resolution::Nine,
    ] {
        let s = run("2026-W48", Some(res));
        assert_eq!(s.resolution, u8::from(res));
        let outliers: Vec<_> = s.regions.iter().flat_map(|r| &r.outliers).collect();
        for inc in &d.incidents.incidents {
            let found = outliers.iter().any(|o| {
                o.kind == inc.kind && o.changesets.iter().any(|c| inc.changesets.contains(c))
            });
            assert!(found, "resolution {res}: {} not found", inc.kind);
        }
        let injected: HashSet<i64> = d
            .incidents
            .incidents
            .iter()
            .flat_map(|i| i.changesets.clone())
            .collect();
        let other = outliers
            .iter()
            .filter(|o| !o.changesets.iter().any(|c| injected.contains(c)))
            .count();
        eprintln!(
            "resolution {res}: {} outliers, {other} outside the incidents",
            outliers.len()
        );
        assert!(
            other <= 3,
            "resolution {res}: {other} outliers outside the incidents"
        );
        // Incidents merge neighbouring cells: never more incidents than outlier cells.
        let incidents: usize = s.regions.iter().map(|r| r.incidents.len()).sum();
        assert!(incidents >= 4 && incidents <= outliers.len());
    }
}

#[test]
fn ordinary_weeks_raise_few_false_outliers() {
    // The twelve weeks before the incident week hold only ordinary mapping: every outlier there
    // is a false one. Acceptance: fewer than one per week on average.
    let mut total = 0;
    let mut per_week = Vec::new();
    for w in 36..=47 {
        let week = format!("2026-W{w}");
        let s = run(&week, None);
        let n: usize = s.regions.iter().map(|r| r.outliers.len()).sum();
        per_week.push(format!("{week}: {n}"));
        total += n;
    }
    eprintln!(
        "false outlier cells per ordinary week: {}",
        per_week.join(", ")
    );
    #[allow(clippy::cast_precision_loss)]
    let mean = total as f64 / 12.0;
    eprintln!("mean {mean:.2} per week");
    assert!(mean < 1.0, "{mean} false outliers per week: {per_week:?}");
}
