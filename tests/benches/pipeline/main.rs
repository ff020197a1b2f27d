//! Side-by-side benchmark of the 2D pipeline: the `kinema` CLI against the numpy/scipy
//! peer (`peer_numpy.py`), in the same run, on the same generated files.
//!
//! For each size (points from `gen_field.py`, seed 42, 0.5 mm noise) it times, as child
//! processes and interleaved repetition by repetition:
//! - `kinema analyze FILE --method delaunay --format csv --output OUT --quiet`
//!   (read, triangulate, strain, principal, write);
//! - `kinema analyze FILE --method neighbourhood --k 12 --format csv --output OUT --quiet`;
//! - `python peer_numpy.py FILE -o OUT` (the peer's triangle pipeline, writing its CSV);
//! - `python peer_numpy.py FILE --no-write` (the peer without building its output).
//!
//! Reported: median wall time of each, the ratio peer/kinema, and the peak resident
//! memory (max RSS, exact per process, see `measure.rs`) per point. The peer has no
//! neighbourhood fit, so the neighbourhood row compares with the peer's triangle run.
//! Targets from issue 2: ratio ≥ 5 and kinema < 300 bytes/point at 10^6 points.
//!
//! Run: `cargo bench -p kinema-tests --bench pipeline [-- --peer-only]`.
//! Environment:
//! - `KINEMA_BENCH_SIZES`: comma-separated point counts (default `10000,100000,1000000`);
//! - `KINEMA_BENCH_REPS`: repetitions per size (default 3 below 10^6 points and 1 from
//!   10^6 up; when set, it applies to every size);
//! - `KINEMA_BIN`: a built `kinema` binary (default: build it with cargo, release);
//! - `KINEMA_PYTHON`: the interpreter with numpy and scipy (default `<root>/.venv`).
//!
//! Output: a markdown table on stdout and every raw measurement in
//! `target/bench-out/pipeline.json`.

mod data;
mod kinema_bin;
mod measure;
mod report;

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use report::{Row, Series};

/// Point counts measured when `KINEMA_BENCH_SIZES` is not set.
const DEFAULT_SIZES: [u64; 3] = [10_000, 100_000, 1_000_000];
/// Neighbourhood size of the neighbourhood fit.
const NEIGHBOURS: u32 = 12;
/// Issue 2 targets, at 10^6 points.
const TARGET_POINTS: u64 = 1_000_000;
const TARGET_RATIO: f64 = 5.0;
const TARGET_BYTES_PER_POINT: f64 = 300.0;
/// Share of the machine's CPUs used by other processes above which the results carry a caution.
const BUSY_WARNING: f64 = 0.25;

const USAGE: &str = "usage: cargo bench -p kinema-tests --bench pipeline [-- --peer-only]
  --peer-only   measure the numpy/scipy peer alone (no kinema build or run)
environment: KINEMA_BENCH_SIZES (default 10000,100000,1000000), KINEMA_BENCH_REPS
(default 3 below 10^6 points, 1 from 10^6), KINEMA_BIN, KINEMA_PYTHON";

fn main() -> ExitCode {
    let args: Vec<String> = std::env::args().skip(1).collect();
    if args.first().map(String::as_str) == Some(measure::WRAPPER_FLAG) {
        return measure::wrapper_main(&args[1..]);
    }
    match parse_args(&args).and_then(|cfg| run(&cfg)) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("\npipeline bench: error: {e}");
            ExitCode::FAILURE
        }
    }
}

/// What to measure.
struct Config {
    /// Point counts, in the order measured.
    sizes: Vec<u64>,
    /// `KINEMA_BENCH_REPS`, if set.
    reps: Option<usize>,
    /// Measure the peer alone.
    peer_only: bool,
}

impl Config {
    /// Repetitions for a data set of `n` points.
    fn reps_for(&self, n: u64) -> usize {
        self.reps.unwrap_or(if n >= 1_000_000 { 1 } else { 3 })
    }
}

fn parse_args(args: &[String]) -> Result<Config, String> {
    let mut peer_only = false;
    for a in args {
        match a.as_str() {
            // cargo bench passes --bench to every bench binary.
            "--bench" => {}
            "--peer-only" => peer_only = true,
            "-h" | "--help" => return Err(USAGE.to_string()),
            other => return Err(format!("unknown argument {other:?}\n{USAGE}")),
        }
    }
    let sizes = match std::env::var("KINEMA_BENCH_SIZES") {
        Ok(s) => parse_sizes(&s)?,
        Err(_) => DEFAULT_SIZES.to_vec(),
    };
    let reps = match std::env::var("KINEMA_BENCH_REPS") {
        Ok(s) => match s.trim().parse::<usize>() {
            Ok(r) if r >= 1 => Some(r),
            _ => {
                return Err(format!(
                    "KINEMA_BENCH_REPS={s:?}: expected a whole number ≥ 1"
                ));
            }
        },
        Err(_) => None,
    };
    Ok(Config {
        sizes,
        reps,
        peer_only,
    })
}

/// Parses `10000,100000,1_000_000` into point counts (each at least 3).
fn parse_sizes(text: &str) -> Result<Vec<u64>, String> {
    let mut sizes = Vec::new();
    for part in text.split(',').map(str::trim).filter(|p| !p.is_empty()) {
        match part.replace('_', "").parse::<u64>() {
            Ok(n) if n >= 3 => sizes.push(n),
            _ => {
                return Err(format!(
                    "KINEMA_BENCH_SIZES: {part:?} is not a point count ≥ 3 \
                     (expected e.g. 10000,100000,1000000)"
                ));
            }
        }
    }
    if sizes.is_empty() {
        return Err("KINEMA_BENCH_SIZES is empty".to_string());
    }
    Ok(sizes)
}

/// Everything a measured run needs to know.
struct Context {
    /// This bench binary, re-executed as the measuring wrapper.
    wrapper: PathBuf,
    /// Python with numpy and scipy.
    python: PathBuf,
    /// Folder of `peer_numpy.py` and `gen_field.py`.
    peer_dir: PathBuf,
    /// The kinema CLI, unless peer-only.
    kinema: Option<PathBuf>,
    /// Scratch folder for the outputs of the measured runs.
    work: PathBuf,
    /// Number of CPUs, for the share of the machine other processes used.
    cpus: usize,
}

/// The kinds of run, in the order they are interleaved within one repetition.
#[derive(Clone, Copy, PartialEq)]
enum Kind {
    KinemaDelaunay,
    Peer,
    PeerNoWrite,
    KinemaNeighbourhood,
}

impl Kind {
    fn label(self) -> String {
        match self {
            Kind::KinemaDelaunay => "kinema delaunay".to_string(),
            Kind::KinemaNeighbourhood => format!("kinema neighbourhood k={NEIGHBOURS}"),
            Kind::Peer => "peer".to_string(),
            Kind::PeerNoWrite => "peer --no-write".to_string(),
        }
    }

    fn is_kinema(self) -> bool {
        matches!(self, Kind::KinemaDelaunay | Kind::KinemaNeighbourhood)
    }

    fn writes_output(self) -> bool {
        self != Kind::PeerNoWrite
    }

    /// File stem of this run's scratch files.
    fn stem(self) -> &'static str {
        match self {
            Kind::KinemaDelaunay => "kinema_delaunay",
            Kind::KinemaNeighbourhood => "kinema_neighbourhood",
            Kind::Peer => "peer",
            Kind::PeerNoWrite => "peer_nowrite",
        }
    }
}

fn run(cfg: &Config) -> Result<(), String> {
    let target = data::target_dir();
    let out_dir = target.join("bench-out");
    let work = out_dir.join("work");
    std::fs::create_dir_all(&work).map_err(|e| format!("cannot create {}: {e}", work.display()))?;
    let python = kinema_tests::python();
    if !python.is_file() {
        return Err(format!(
            "KINEMA_PYTHON={} is not a file: run scripts/test once (it creates .venv with \
             numpy and scipy) or point KINEMA_PYTHON at such an interpreter",
            python.display()
        ));
    }
    let kinema = if cfg.peer_only {
        None
    } else {
        Some(kinema_bin::locate()?)
    };
    let ctx = Context {
        wrapper: std::env::current_exe()
            .map_err(|e| format!("cannot find this bench binary (for the wrapper): {e}"))?,
        python,
        peer_dir: kinema_tests::peer_dir(),
        kinema,
        work,
        cpus: std::thread::available_parallelism().map_or(1, |n| n.get()),
    };
    let kinds: Vec<Kind> = [
        Kind::KinemaDelaunay,
        Kind::Peer,
        Kind::PeerNoWrite,
        Kind::KinemaNeighbourhood,
    ]
    .into_iter()
    .filter(|k| !(cfg.peer_only && k.is_kinema()))
    .collect();

    let load_start = loadavg();
    let mut busiest_others: f64 = 0.0;
    let mut rows = Vec::new();
    let mut cases = Vec::new();
    for &n in &cfg.sizes {
        let file = data::ensure_data(&ctx.python, &ctx.peer_dir, n)?;
        data::warm_cache(&file)?;
        let reps = cfg.reps_for(n);
        let mut series: Vec<(Kind, Series)> = kinds
            .iter()
            .map(|&k| {
                let s = Series {
                    label: k.label(),
                    command: command_line(&ctx, k, &file, n),
                    reps: Vec::new(),
                    output_lines: None,
                    peer_stages: None,
                };
                (k, s)
            })
            .collect();
        for rep in 1..=reps {
            for (kind, s) in series.iter_mut() {
                run_one(&ctx, *kind, n, s)?;
                if let Some(m) = s.reps.last() {
                    let others = foreign_share(m, ctx.cpus);
                    // /proc/stat counts in 10 ms ticks: too coarse for short runs.
                    if m.wall_s >= 0.5 {
                        busiest_others = busiest_others.max(others.unwrap_or(0.0));
                    }
                    eprintln!(
                        "[bench] {n} points, rep {rep}/{reps}: {:<28} {:8.3} s  {:8.1} MiB  \
                         {:6.0} B/pt  (other processes: {})",
                        s.label,
                        m.wall_s,
                        m.max_rss_kib as f64 / 1024.0,
                        m.bytes_per_point(n),
                        others.map_or_else(
                            || "?".to_string(),
                            |f| format!("{:.0}% of the CPUs", f * 100.0)
                        )
                    );
                }
            }
        }
        let get = |k: Kind| series.iter().find(|(kk, _)| *kk == k).map(|(_, s)| s);
        let (Some(peer), Some(peer_nw)) = (get(Kind::Peer), get(Kind::PeerNoWrite)) else {
            return Err("internal: peer series missing".to_string());
        };
        let kd = get(Kind::KinemaDelaunay);
        let kn = get(Kind::KinemaNeighbourhood);
        rows.push(Row::compare(n, "delaunay", kd, peer));
        rows.push(Row::compare(n, "delaunay vs peer --no-write", kd, peer_nw));
        if !cfg.peer_only {
            rows.push(Row::compare(
                n,
                &format!("neighbourhood k={NEIGHBOURS} (peer: triangles)"),
                kn,
                peer,
            ));
        }
        cases.push(serde_json::json!({
            "points": n,
            "data_file": file,
            "reps": reps,
            "series": series.iter().map(|(_, s)| s).collect::<Vec<_>>(),
        }));
    }
    let load_end = loadavg();

    let table = report::markdown_table(&rows);
    println!("\n{table}");
    println!(
        "Wall times are medians over the repetitions; B/pt is the largest peak RSS of the \
         whole process over the repetitions divided by the number of points. The peer \
         has no neighbourhood fit: that row compares with its triangle pipeline."
    );
    if busiest_others > BUSY_WARNING {
        println!(
            "Caution: other processes used up to {:.0}% of the machine's CPUs during some \
             runs (see `foreign_cpu_s` in the JSON); wall times may be inflated.",
            busiest_others * 100.0
        );
    }
    let verdicts = target_verdicts(&rows, cfg.peer_only);
    for v in &verdicts {
        println!("{v}");
    }

    let record = serde_json::json!({
        "bench": "tests/benches/pipeline",
        "unix_time_s": std::time::SystemTime::now()
            .duration_since(std::time::UNIX_EPOCH)
            .map_or(0, |d| d.as_secs()),
        "peer_only": cfg.peer_only,
        "kinema_bin": ctx.kinema,
        "python": ctx.python,
        "peer_dir": ctx.peer_dir,
        "data": { "generator": "gen_field.py", "dim": 2, "seed": data::SEED, "noise_mm": data::NOISE_MM },
        "machine": { "cpus": ctx.cpus, "loadavg_start": load_start, "loadavg_end": load_end },
        "targets": { "points": TARGET_POINTS, "ratio_min": TARGET_RATIO,
                     "kinema_bytes_per_point_max": TARGET_BYTES_PER_POINT, "verdicts": verdicts },
        "rows": rows,
        "cases": cases,
    });
    let json_path = out_dir.join("pipeline.json");
    let text = serde_json::to_string_pretty(&record)
        .map_err(|e| format!("cannot encode the JSON record: {e}"))?;
    std::fs::write(&json_path, text + "\n")
        .map_err(|e| format!("cannot write {}: {e}", json_path.display()))?;
    eprintln!("[bench] wrote {}", json_path.display());
    Ok(())
}

/// Program and arguments of one kind of run on `file`.
fn command_line(ctx: &Context, kind: Kind, file: &Path, n: u64) -> Vec<String> {
    let out = out_path(ctx, kind, n);
    let s = |p: &Path| p.display().to_string();
    let peer = s(&ctx.peer_dir.join("peer_numpy.py"));
    let timings = s(&ctx.work.join(format!("{}_{n}_timings.json", kind.stem())));
    let kinema = ctx.kinema.as_deref().map(s).unwrap_or_default();
    let v: Vec<String> = match kind {
        Kind::KinemaDelaunay => vec![
            kinema,
            "analyze".into(),
            s(file),
            "--method".into(),
            "delaunay".into(),
            "--format".into(),
            "csv".into(),
            "--output".into(),
            s(&out),
            "--quiet".into(),
        ],
        Kind::KinemaNeighbourhood => vec![
            kinema,
            "analyze".into(),
            s(file),
            "--method".into(),
            "neighbourhood".into(),
            "--k".into(),
            NEIGHBOURS.to_string(),
            "--format".into(),
            "csv".into(),
            "--output".into(),
            s(&out),
            "--quiet".into(),
        ],
        Kind::Peer => vec![
            s(&ctx.python),
            peer,
            s(file),
            "-o".into(),
            s(&out),
            "--timings-json".into(),
            timings,
        ],
        Kind::PeerNoWrite => vec![
            s(&ctx.python),
            peer,
            s(file),
            "--no-write".into(),
            "--timings-json".into(),
            timings,
        ],
    };
    v
}

/// Scratch output file of one kind of run.
fn out_path(ctx: &Context, kind: Kind, n: u64) -> PathBuf {
    ctx.work.join(format!("{}_{n}.csv", kind.stem()))
}

/// Runs one repetition of `kind`, checks that it worked and appends it to `series`.
fn run_one(ctx: &Context, kind: Kind, n: u64, series: &mut Series) -> Result<(), String> {
    let out = out_path(ctx, kind, n);
    // A stale file from an earlier run must not pass for this run's output.
    let _ = std::fs::remove_file(&out);
    let Some((program, args)) = series.command.split_first() else {
        return Err("internal: empty command".to_string());
    };
    let outcome = measure::measure(
        &ctx.wrapper,
        Path::new(program),
        args,
        &kinema_tests::workspace_root(),
    )?;
    let m = outcome.measurement;
    if !m.succeeded() {
        return Err(format!(
            "{} failed on {n} points ({}). Command: {}\nIts stderr (last lines):\n{}",
            series.label,
            m.describe_end(),
            series.command.join(" "),
            measure::tail(&outcome.stderr, 30)
        ));
    }
    if kind.writes_output() {
        let lines = if out.is_file() {
            data::count_lines(&out)?
        } else {
            0
        };
        if lines < 2 {
            let hint = if kind.is_kinema() {
                " Does this build of the kinema CLI implement `kinema analyze` with these \
                 flags? Set KINEMA_BIN to one that does, or run with --peer-only."
            } else {
                ""
            };
            return Err(format!(
                "{} exited 0 on {n} points but wrote {} to {}.{hint}\nCommand: {}\nIts stderr:\n{}",
                series.label,
                if out.is_file() {
                    "no element rows"
                } else {
                    "no output file"
                },
                out.display(),
                series.command.join(" "),
                measure::tail(&outcome.stderr, 30)
            ));
        }
        series.output_lines = Some(lines);
        // The outputs of 10^6 points take hundreds of MB: keep only the counts.
        let _ = std::fs::remove_file(&out);
    }
    if !kind.is_kinema() {
        let tj = ctx.work.join(format!("{}_{n}_timings.json", kind.stem()));
        series.peer_stages = std::fs::read_to_string(&tj)
            .ok()
            .and_then(|t| serde_json::from_str(&t).ok());
    }
    series.reps.push(m);
    Ok(())
}

/// Share of the machine's CPUs (0..1) that other processes used during the run `m`.
fn foreign_share(m: &measure::Measurement, cpus: usize) -> Option<f64> {
    m.foreign_cpu_s
        .map(|f| f / (m.wall_s.max(1e-9) * cpus.max(1) as f64))
}

/// The machine's 1, 5 and 15 minute load averages, if readable.
fn loadavg() -> Option<[f64; 3]> {
    let text = std::fs::read_to_string("/proc/loadavg").ok()?;
    let v: Vec<f64> = text
        .split_whitespace()
        .take(3)
        .filter_map(|f| f.parse().ok())
        .collect();
    Some([*v.first()?, *v.get(1)?, *v.get(2)?])
}

/// One line per issue-2 target: the value measured at 10^6 points and whether it is met.
fn target_verdicts(rows: &[Row], peer_only: bool) -> Vec<String> {
    if peer_only {
        return vec!["Targets: not evaluated (--peer-only: kinema was not run).".to_string()];
    }
    let at: Vec<&Row> = rows.iter().filter(|r| r.points == TARGET_POINTS).collect();
    if at.is_empty() {
        return vec![format!(
            "Targets: stated at {TARGET_POINTS} points, which this run did not measure."
        )];
    }
    let mut out = Vec::new();
    let met = |ok: bool| if ok { "met" } else { "NOT met" };
    for r in &at {
        if r.method == "delaunay"
            && let Some(ratio) = r.ratio
        {
            out.push(format!(
                "Target at {TARGET_POINTS} points: peer/kinema ≥ {TARGET_RATIO} end to end \
                 (delaunay, both writing CSV): {ratio:.2} — {}",
                met(ratio >= TARGET_RATIO)
            ));
        }
        if r.method == "delaunay vs peer --no-write" {
            continue;
        }
        if let Some(b) = r.kinema_bytes_per_point {
            out.push(format!(
                "Target at {TARGET_POINTS} points: kinema peak memory < {TARGET_BYTES_PER_POINT} \
                 B/pt ({}): {b:.0} B/pt — {}",
                r.method.split(" (peer").next().unwrap_or(&r.method),
                met(b < TARGET_BYTES_PER_POINT)
            ));
        }
    }
    out
}
