//! The demo scenario generator: the input side of `hexvigil demo`. It invents the Velloran
//! Coast, a fictional stretch of coast in the open North Atlantic with the town of Quillhaven,
//! four villages and an islet, and writes standard OSM files for it: a snapshot at the start of
//! the period, the changeset metadata dump (with each mapper's earlier history), one gzipped
//! osmChange file per day of ordinary mapping by a few hundred mappers, and four incidents
//! injected into the last week, whose ground truth goes to `incidents.json`.
//!
//! Everything is derived from one seed (ChaCha8), so the same options give byte-identical files.
//! The land layer and the two regions are embedded, so the binary works from any directory.

mod activity;
mod geography;
mod incidents;
mod names;
mod people;
mod reverts;
mod sample;
mod snapshot;
mod world;
mod xml;

use std::fs;
use std::path::{Path, PathBuf};

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde::{Deserialize, Serialize};

use crate::land::Land;
use activity::{Activity, Ordinary, Work};
use geography::{Area, Geo, P};
use names::Names;
use people::{changeset_tags, People, Role, CHANGESET_BASE, DAY};
use sample::{mix, poisson, weighted};

pub use reverts::EarlierCase;
use snapshot::Builder;
use world::{Bbox, ChangesetMeta, Session, World};

/// The demo's land layer (GeoJSON FeatureCollection of the mainland and the islet).
pub const LAND_GEOJSON: &str = include_str!("../../fixtures/demo/land.geojson");
/// The demo's two regions (GeoJSON polygons with a `name`), covering land and coastal sea.
pub const REGIONS_GEOJSON: &str = include_str!("../../fixtures/demo/regions.geojson");

/// The last day of the diff period (a Sunday, so the report week 2026-W48 is complete).
const LAST_DAY: (i64, u32, u32) = (2026, 11, 29);
/// Largest `weeks` accepted (ten years).
const MAX_WEEKS: u32 = 520;
/// Largest `intensity` accepted.
const MAX_INTENSITY: f64 = 100.0;
/// Mean ordinary changesets per day by established mappers at intensity 1.
const DAILY_CHANGESETS: f64 = 110.0;
/// Relative activity Monday to Sunday.
const WEEKDAY: [f64; 7] = [0.95, 0.95, 0.95, 0.95, 1.0, 1.15, 1.05];
/// Relative activity by hour of day (UTC; the coast is two hours behind).
const HOURS: [f64; 24] = [
    3.0, 2.0, 1.5, 1.0, 0.6, 0.4, 0.4, 0.6, 1.0, 1.5, 2.0, 2.5, 3.0, 3.0, 3.0, 3.0, 3.0, 3.5, 4.0,
    4.5, 5.0, 5.0, 4.5, 4.0,
];
/// Mixed with the seed for the earlier cases' random stream.
const EARLIER_STREAM: u64 = 0x4541_524C_4945_5253;
/// Mean new accounts per week at intensity 1.
const NEWCOMERS_PER_WEEK: f64 = 3.0;

/// What to generate.
#[derive(Debug, Clone, PartialEq)]
pub struct DemoOptions {
    /// Seed of the random generator; the same seed gives the same files.
    pub seed: u64,
    /// Weeks of daily diffs, ending on Sunday 2026-11-29 (default 14).
    pub weeks: u32,
    /// Multiplies the volume of ordinary mapping (default 1.0), for benchmarks.
    pub intensity: f64,
}

impl Default for DemoOptions {
    fn default() -> Self {
        Self {
            seed: 7,
            weeks: 14,
            intensity: 1.0,
        }
    }
}

/// The files [`generate`] wrote.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct DemoFiles {
    /// `snapshot.osm`: the map at the start of the period (OSM XML 0.6).
    pub snapshot: PathBuf,
    /// `changesets.osm`: metadata of every changeset, including mappers' earlier history.
    pub changesets: PathBuf,
    /// `diffs/YYYY-MM-DD.osc.gz`, one per day, in date order.
    pub diffs: Vec<PathBuf>,
    /// `land.geojson`: the land layer.
    pub land: PathBuf,
    /// `regions.geojson`: the two report regions.
    pub regions: PathBuf,
    /// `incidents.json`: the injected incidents ([`Incidents`]).
    pub incidents: PathBuf,
}

/// Errors generating the scenario.
#[derive(Debug, thiserror::Error)]
pub enum DemoError {
    /// The options are out of range.
    #[error("invalid demo options: {0}")]
    Options(String),
    /// A file or directory could not be written.
    #[error("{path}: {source}")]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    /// `incidents.json` could not be written.
    #[error("{path}: cannot write incidents: {source}")]
    Json {
        path: PathBuf,
        source: serde_json::Error,
    },
    /// The embedded land layer does not parse (a build defect).
    #[error("embedded demo land layer is invalid: {0}")]
    Fixture(String),
    /// The scenario could not place an incident (a generator defect).
    #[error("demo scenario cannot be built: {0}")]
    Scenario(String),
}

/// The ground truth, also written to `incidents.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Incidents {
    /// The report week's injected incidents.
    pub incidents: Vec<Incident>,
    /// Earlier weeks' vandalism and honest mistakes, each already reverted.
    #[serde(default)]
    pub earlier: Vec<EarlierCase>,
}

/// One injected incident.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Incident {
    /// `deletion_burst`, `offshore_fabrication`, `newcomer_surge` or `rename_spam`.
    pub kind: String,
    /// Centre of the incident's edits.
    pub lat: f64,
    pub lon: f64,
    /// The injected changeset ids (present in `changesets.osm` and the diffs).
    pub changesets: Vec<i64>,
    pub description: String,
}

/// What a changeset of the diff period does.
enum Task {
    Ordinary {
        work: Ordinary,
        newcomer: bool,
    },
    Incident {
        task: incidents::Task,
        comment: Option<&'static str>,
        editor: &'static str,
    },
    /// Earlier vandalism, an honest mistake, or their reverts.
    Earlier {
        step: reverts::Step,
    },
}

/// A changeset of the diff period before it gets its id.
struct Job {
    created_at: i64,
    upload: i64,
    user: u32,
    task: Task,
}

fn io_error(path: &Path) -> impl FnOnce(std::io::Error) -> DemoError + '_ {
    move |source| DemoError::Io {
        path: path.to_owned(),
        source,
    }
}

/// Times an upload `len` seconds after `created_at`, shifted earlier if it would leave the day,
/// so that every changeset's edits land in its day's file.
fn timed(created_at: i64, len: i64) -> (i64, i64) {
    let day_end = created_at.div_euclid(DAY) * DAY + DAY - 600;
    let created_at = created_at.min(day_end - len);
    (created_at, created_at + len)
}

/// A session start and upload time for ordinary work of `units` on the day starting `day`.
fn ordinary_times(rng: &mut ChaCha8Rng, day: i64, units: u32) -> (i64, i64) {
    let len = (120 + i64::from(units) * rng.gen_range(30..120)).min(3 * 3600);
    let hours: Vec<(i64, f64)> = (0..24).zip(HOURS).collect();
    let hour = weighted(rng, &hours).unwrap_or(20);
    timed(day + hour * 3600 + rng.gen_range(0..3600), len)
}

fn is_daily_diff_name(name: &str) -> bool {
    let b = name.as_bytes();
    name.len() == 17
        && name.ends_with(".osc.gz")
        && b[..10].iter().enumerate().all(|(i, c)| {
            if i == 4 || i == 7 {
                *c == b'-'
            } else {
                c.is_ascii_digit()
            }
        })
}

/// Removes daily diff files of an earlier run, so a shorter run leaves no stale days.
fn clear_old_diffs(dir: &Path) -> Result<(), DemoError> {
    let mut old = Vec::new();
    for entry in fs::read_dir(dir).map_err(io_error(dir))? {
        let entry = entry.map_err(io_error(dir))?;
        if entry.file_name().to_str().is_some_and(is_daily_diff_name) {
            old.push(entry.path());
        }
    }
    old.sort();
    for path in old {
        fs::remove_file(&path).map_err(io_error(&path))?;
    }
    Ok(())
}

fn validate(opts: &DemoOptions) -> Result<(), DemoError> {
    if opts.weeks == 0 || opts.weeks > MAX_WEEKS {
        return Err(DemoError::Options(format!(
            "weeks must be between 1 and {MAX_WEEKS}, not {}",
            opts.weeks
        )));
    }
    if !opts.intensity.is_finite() || opts.intensity < 0.0 || opts.intensity > MAX_INTENSITY {
        return Err(DemoError::Options(format!(
            "intensity must be between 0 and {MAX_INTENSITY}, not {}",
            opts.intensity
        )));
    }
    Ok(())
}

/// Writes the scenario's input files under `input_dir` (created if needed): `snapshot.osm`,
/// `changesets.osm`, `diffs/YYYY-MM-DD.osc.gz` (daily files of an earlier run there are
/// replaced), `land.geojson`, `regions.geojson` and `incidents.json`.
///
/// # Errors
/// [`DemoError::Options`] for out-of-range options, [`DemoError::Io`] naming the path that could
/// not be written.
pub fn generate(input_dir: &Path, opts: &DemoOptions) -> Result<DemoFiles, DemoError> {
    validate(opts)?;
    let diffs_dir = input_dir.join("diffs");
    fs::create_dir_all(&diffs_dir).map_err(io_error(&diffs_dir))?;
    clear_old_diffs(&diffs_dir)?;
    let land_path = input_dir.join("land.geojson");
    fs::write(&land_path, LAND_GEOJSON).map_err(io_error(&land_path))?;
    let regions_path = input_dir.join("regions.geojson");
    fs::write(&regions_path, REGIONS_GEOJSON).map_err(io_error(&regions_path))?;
    let geo = Geo::new(Land::from_geojson_str(LAND_GEOJSON).map_err(DemoError::Fixture)?);

    let mut rng = ChaCha8Rng::seed_from_u64(opts.seed);
    let salt: u64 = rng.gen();
    let mut names = Names::new();
    let last_day = xml::days_from_civil(LAST_DAY.0, LAST_DAY.1, LAST_DAY.2);
    let days = usize::try_from(opts.weeks).unwrap_or(1) * 7;
    let first_day = last_day - i64::from(opts.weeks) * 7 + 1;
    let period_start = first_day * DAY;

    // People: established mappers, newcomers week by week, incident accounts.
    let mut people = People::new(&mut rng, &mut names, period_start);
    let mut newcomer_days: Vec<Vec<(u32, bool)>> = (0..days).map(|_| Vec::new()).collect();
    for week in 0..days / 7 {
        for _ in 0..poisson(&mut rng, NEWCOMERS_PER_WEEK * opts.intensity) {
            let d0 = week * 7 + rng.gen_range(0..7);
            let first = (first_day + i64::try_from(d0).unwrap_or(0)) * DAY + 8 * 3600;
            let user = people.add(&mut rng, &mut names, Role::Newcomer, None, None, first);
            newcomer_days[d0].push((user, true));
            for _ in 1..rng.gen_range(1..=3) {
                let d = d0 + rng.gen_range(1..=10);
                if let Some(day) = newcomer_days.get_mut(d) {
                    day.push((user, false));
                }
            }
        }
    }
    let monday = (last_day - 6) * DAY;
    let (planned, mut state, burst_history) =
        incidents::plan(&mut rng, &mut people, &mut names, monday, period_start);
    // The earlier cases draw from their own stream, so ordinary mapping keeps its character.
    let mut erng = ChaCha8Rng::seed_from_u64(mix(opts.seed ^ EARLIER_STREAM));
    let (earlier_planned, mut earlier, mut extra_history) =
        reverts::plan(&mut erng, &mut people, &mut names, first_day, opts.weeks);
    people.assign_uids();
    extra_history.insert(0, burst_history);
    let mut hist = people::history(&mut rng, &people, &extra_history, period_start);

    // The map at the start of the period.
    let mut world = World::new();
    snapshot::build(&mut Builder::new(
        &mut world, &mut rng, &geo, &mut names, &mut hist,
    ));
    people::finish_history(&mut rng, &geo, &mut hist);
    let snapshot_path = input_dir.join("snapshot.osm");
    let (lo, hi) = (P::new(-21.0, -16.5).to_e7(), P::new(9.0, 16.5).to_e7());
    let bounds = Bbox {
        min_lat: lo.0,
        min_lon: lo.1,
        max_lat: hi.0,
        max_lon: hi.1,
    };
    xml::write_snapshot(&snapshot_path, &world, &people.users, bounds)?;

    // The diff period, day by day.
    let mut incident_days: Vec<Vec<Job>> = (0..days).map(|_| Vec::new()).collect();
    for p in planned {
        let d = usize::try_from(p.created_at.div_euclid(DAY) - first_day).unwrap_or(usize::MAX);
        if let Some(day) = incident_days.get_mut(d) {
            day.push(Job {
                created_at: p.created_at,
                upload: p.upload,
                user: p.user,
                task: Task::Incident {
                    task: p.task,
                    comment: p.comment,
                    editor: p.editor,
                },
            });
        }
    }
    for p in earlier_planned {
        let d = usize::try_from(p.created_at.div_euclid(DAY) - first_day).unwrap_or(usize::MAX);
        if let Some(day) = incident_days.get_mut(d) {
            day.push(Job {
                created_at: p.created_at,
                upload: p.upload,
                user: p.user,
                task: Task::Earlier { step: p.step },
            });
        }
    }
    let table = people.established_table();
    let mut next_id = CHANGESET_BASE + i64::try_from(hist.len()).unwrap_or(0);
    let mut changesets: Vec<ChangesetMeta> = Vec::new();
    let mut diffs = Vec::with_capacity(days);
    for (d, incident_jobs) in incident_days.into_iter().enumerate() {
        let day_number = first_day + i64::try_from(d).unwrap_or(0);
        let day = day_number * DAY;
        let mut jobs = incident_jobs;
        let lambda = DAILY_CHANGESETS * WEEKDAY[d % 7] * opts.intensity;
        for _ in 0..poisson(&mut rng, lambda) {
            let user = people.pick_established(&mut rng, &table);
            let area = if rng.gen_bool(0.8) {
                people.users[user as usize].home
            } else {
                let areas: Vec<(Area, f64)> =
                    Area::all().map(|a| (a, a.activity_weight())).collect();
                weighted(&mut rng, &areas).unwrap_or(Area::Town)
            };
            jobs.push(ordinary_job(&mut rng, day, user, area, false));
        }
        for &(user, first) in &newcomer_days[d] {
            let area = people.users[user as usize].home;
            let mut job = ordinary_job(&mut rng, day, user, area, true);
            if first {
                // A newcomer's very first changeset is tiny.
                if let Task::Ordinary { work, .. } = &mut job.task {
                    work.units = work.units.min(2);
                }
            }
            jobs.push(job);
        }
        jobs.sort_by_key(|j| j.created_at);
        let ids: Vec<i64> = (0..jobs.len())
            .map(|_| {
                next_id += 1;
                next_id - 1
            })
            .collect();
        let mut order: Vec<(Job, i64)> = jobs.into_iter().zip(ids).collect();
        order.sort_by_key(|(j, id)| (j.upload, *id));

        let path = diffs_dir.join(format!("{}.osc.gz", xml::date_string(day_number)));
        let mut out = xml::DiffWriter::create(&path)?;
        for (job, id) in order {
            let incident = match job.task {
                Task::Incident { .. } => true,
                Task::Earlier { step } => reverts::is_damage(step),
                Task::Ordinary { .. } => false,
            };
            let mut s = Session::new(
                &mut world,
                &mut out,
                &people.users,
                id,
                job.user,
                job.upload,
                salt,
                incident,
            );
            match &job.task {
                Task::Ordinary { work, .. } => Work {
                    s: &mut s,
                    rng: &mut rng,
                    geo: &geo,
                    names: &mut names,
                }
                .run(work)?,
                Task::Incident { task, .. } => {
                    incidents::run(*task, &mut s, &mut rng, &geo, &mut names, &mut state)?;
                    incidents::record(&mut state, *task, id, &s);
                }
                Task::Earlier { step } => {
                    reverts::run(*step, &mut s, &mut erng, &geo, &mut earlier)?;
                    reverts::record(&mut earlier, *step, id);
                }
            }
            let (bbox, num_changes) = (s.bbox, s.changes);
            let tags = match job.task {
                Task::Ordinary { work, newcomer } => {
                    let comment = (newcomer || rng.gen_bool(0.85))
                        .then(|| work.activity.comment(&mut rng, work.area));
                    let editor = people.users[job.user as usize].editor;
                    changeset_tags(&mut rng, comment, editor)
                }
                Task::Earlier { step } => {
                    let comment = reverts::comment(&mut earlier, step, &mut erng);
                    changeset_tags(&mut erng, comment, people.users[job.user as usize].editor)
                }
                Task::Incident {
                    comment, editor, ..
                } => comment
                    .map(|c| ("comment", c.to_owned()))
                    .into_iter()
                    .chain([("created_by", editor.to_owned())])
                    .collect(),
            };
            let linger = if rng.gen_bool(0.9) {
                rng.gen_range(1..=6)
            } else {
                3600
            };
            changesets.push(ChangesetMeta {
                id,
                user: job.user,
                created_at: job.created_at,
                closed_at: job.upload + linger,
                bbox,
                num_changes,
                tags,
            });
        }
        out.finish()?;
        diffs.push(path);
    }
    changesets.sort_by_key(|c| c.id);

    let changesets_path = input_dir.join("changesets.osm");
    xml::write_changesets(
        &changesets_path,
        hist.iter().map(|(c, _)| c).chain(&changesets),
        &people.users,
    )?;
    let incidents_path = input_dir.join("incidents.json");
    let truth = Incidents {
        incidents: incidents::finish(&state, &people, &geo),
        earlier: reverts::finish(&earlier),
    };
    let mut text = serde_json::to_string_pretty(&truth).map_err(|source| DemoError::Json {
        path: incidents_path.clone(),
        source,
    })?;
    text.push('\n');
    fs::write(&incidents_path, text).map_err(io_error(&incidents_path))?;

    Ok(DemoFiles {
        snapshot: snapshot_path,
        changesets: changesets_path,
        diffs,
        land: land_path,
        regions: regions_path,
        incidents: incidents_path,
    })
}

fn ordinary_job(rng: &mut ChaCha8Rng, day: i64, user: u32, area: Area, newcomer: bool) -> Job {
    let activity = Activity::pick(rng, area, newcomer);
    let units = activity.units(rng, newcomer);
    let (created_at, upload) = ordinary_times(rng, day, units);
    Job {
        created_at,
        upload,
        user,
        task: Task::Ordinary {
            work: Ordinary {
                area,
                activity,
                units,
            },
            newcomer,
        },
    }
}
