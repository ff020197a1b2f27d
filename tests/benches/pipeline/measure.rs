//! Wall time, CPU time and exact peak memory of one child process.
//!
//! `getrusage(RUSAGE_CHILDREN)` reports the largest peak resident set size over ALL
//! waited-for children of a process, so a harness that spawns many runs cannot read the
//! peak of one run from it. Each measured run is therefore started through a fresh
//! intermediary: this bench binary re-executed with [`WRAPPER_FLAG`]. The wrapper has
//! exactly one child, the measured command, so after waiting for it the value is exact.
//! The wrapper prints one JSON line ([`Measurement`]) on its stdout.

use std::path::Path;
use std::process::{Command, ExitCode, Stdio};
use std::time::Instant;

use nix::sys::resource::{UsageWho, getrusage};
use nix::sys::time::TimeValLike;
use serde::{Deserialize, Serialize};

/// First argument that turns the bench binary into the measuring wrapper:
/// `pipeline --measure-child -- PROGRAM ARGS...`.
pub const WRAPPER_FLAG: &str = "--measure-child";

/// Resources used by one measured child process.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct Measurement {
    /// Wall time from spawn to exit of the child, seconds.
    pub wall_s: f64,
    /// User CPU time of the child (all threads), seconds.
    pub user_s: f64,
    /// System CPU time of the child (all threads), seconds.
    pub sys_s: f64,
    /// Peak resident set size of the child, KiB (Linux reports `ru_maxrss` in KiB).
    pub max_rss_kib: u64,
    /// Exit code of the child, if it exited normally.
    pub exit_code: Option<i32>,
    /// Signal that ended the child, if any.
    pub signal: Option<i32>,
    /// CPU seconds that OTHER processes used on the machine during the run
    /// (from `/proc/stat`, minus this child's own CPU time); filled in by the parent.
    #[serde(default)]
    pub foreign_cpu_s: Option<f64>,
}

impl Measurement {
    /// True when the child exited with code 0.
    pub fn succeeded(&self) -> bool {
        self.exit_code == Some(0)
    }

    /// Peak memory of the child divided by `points`, bytes per point.
    pub fn bytes_per_point(&self, points: u64) -> f64 {
        (self.max_rss_kib as f64) * 1024.0 / (points.max(1) as f64)
    }

    /// How the child ended, for error messages.
    pub fn describe_end(&self) -> String {
        match (self.exit_code, self.signal) {
            (Some(c), _) => format!("exit code {c}"),
            (None, Some(s)) => format!("killed by signal {s}"),
            (None, None) => "unknown end".to_string(),
        }
    }
}

/// Entry point of the wrapper mode. `args` are the arguments after [`WRAPPER_FLAG`]
/// (an optional `--`, then the program and its arguments).
pub fn wrapper_main(args: &[String]) -> ExitCode {
    let args = match args.first() {
        Some(first) if first == "--" => &args[1..],
        _ => args,
    };
    let Some((program, rest)) = args.split_first() else {
        eprintln!("pipeline {WRAPPER_FLAG}: no program given");
        return ExitCode::from(2);
    };
    match run_and_measure(program, rest) {
        Ok(m) => match serde_json::to_string(&m) {
            Ok(line) => {
                println!("{line}");
                ExitCode::SUCCESS
            }
            Err(e) => {
                eprintln!("pipeline {WRAPPER_FLAG}: cannot encode the measurement: {e}");
                ExitCode::from(2)
            }
        },
        Err(e) => {
            eprintln!("pipeline {WRAPPER_FLAG}: {e}");
            ExitCode::from(2)
        }
    }
}

/// Runs `program` with `args` (stdin and stdout closed, stderr inherited), waits for it
/// and reads the resources it used.
fn run_and_measure(program: &str, args: &[String]) -> Result<Measurement, String> {
    use std::os::unix::process::ExitStatusExt;
    let start = Instant::now();
    let status = Command::new(program)
        .args(args)
        .stdin(Stdio::null())
        .stdout(Stdio::null())
        .stderr(Stdio::inherit())
        .status()
        .map_err(|e| format!("cannot start {program}: {e}"))?;
    let wall_s = start.elapsed().as_secs_f64();
    let usage = getrusage(UsageWho::RUSAGE_CHILDREN)
        .map_err(|e| format!("getrusage(RUSAGE_CHILDREN) failed: {e}"))?;
    Ok(Measurement {
        wall_s,
        user_s: usage.user_time().num_microseconds() as f64 * 1e-6,
        sys_s: usage.system_time().num_microseconds() as f64 * 1e-6,
        max_rss_kib: u64::try_from(usage.max_rss()).unwrap_or(0),
        exit_code: status.code(),
        signal: status.signal(),
        foreign_cpu_s: None,
    })
}

/// What one measured run produced: the measurement and the child's stderr.
pub struct Outcome {
    /// Resources used by the child.
    pub measurement: Measurement,
    /// Everything the child wrote on stderr.
    pub stderr: String,
}

/// Measures `program args...` through a fresh wrapper process (`wrapper_exe`, the bench
/// binary itself). `cwd` is the child's working folder.
pub fn measure(
    wrapper_exe: &Path,
    program: &Path,
    args: &[String],
    cwd: &Path,
) -> Result<Outcome, String> {
    let busy_before = machine_busy_s();
    let out = Command::new(wrapper_exe)
        .arg(WRAPPER_FLAG)
        .arg("--")
        .arg(program)
        .args(args)
        .current_dir(cwd)
        .stdin(Stdio::null())
        .output()
        .map_err(|e| {
            format!(
                "cannot start the measuring wrapper {}: {e}",
                wrapper_exe.display()
            )
        })?;
    let busy_after = machine_busy_s();
    let stderr = String::from_utf8_lossy(&out.stderr).into_owned();
    if !out.status.success() {
        return Err(format!(
            "the measuring wrapper failed ({}) for {}:\n{}",
            out.status,
            program.display(),
            tail(&stderr, 40)
        ));
    }
    let stdout = String::from_utf8_lossy(&out.stdout);
    let line = stdout.lines().last().unwrap_or_default();
    let mut measurement: Measurement = serde_json::from_str(line)
        .map_err(|e| format!("cannot read the wrapper's measurement {line:?}: {e}"))?;
    if let (Some(a), Some(b)) = (busy_before, busy_after) {
        let own = measurement.user_s + measurement.sys_s;
        measurement.foreign_cpu_s = Some((b - a - own).max(0.0));
    }
    Ok(Outcome {
        measurement,
        stderr,
    })
}

/// Busy CPU seconds of the whole machine so far (all CPUs), from the first line of
/// `/proc/stat`: user + nice + system + irq + softirq + steal. `/proc/stat` counts in
/// USER_HZ ticks, which is 100 per second on Linux (common practice; the kernel keeps
/// that unit fixed for user space). `None` where `/proc/stat` cannot be read.
fn machine_busy_s() -> Option<f64> {
    let text = std::fs::read_to_string("/proc/stat").ok()?;
    let first = text.lines().next()?;
    let v: Vec<u64> = first
        .split_whitespace()
        .skip(1)
        .filter_map(|f| f.parse().ok())
        .collect();
    if v.len() < 8 {
        return None;
    }
    let busy = v[0] + v[1] + v[2] + v[5] + v[6] + v[7];
    Some(busy as f64 / 100.0)
}

/// The last `lines` lines of `text`.
pub fn tail(text: &str, lines: usize) -> String {
    if text.trim().is_empty() {
        return "(nothing)".to_string();
    }
    let all: Vec<&str> = text.lines().collect();
    let start = all.len().saturating_sub(lines);
    all[start..].join("\n")
}
