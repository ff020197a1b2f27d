//! Summaries of repeated runs, the markdown table and the JSON record.

use serde::Serialize;

use crate::measure::Measurement;

/// Median of `values` (mean of the two middle values for an even count); `None` if empty.
pub fn median(values: &[f64]) -> Option<f64> {
    let mut v: Vec<f64> = values.iter().copied().filter(|x| x.is_finite()).collect();
    if v.is_empty() {
        return None;
    }
    v.sort_by(f64::total_cmp);
    let m = v.len() / 2;
    Some(if v.len() % 2 == 1 {
        v[m]
    } else {
        0.5 * (v[m - 1] + v[m])
    })
}

/// All repetitions of one command on one data set.
#[derive(Debug, Clone, Serialize)]
pub struct Series {
    /// What was run, e.g. `kinema delaunay` or `peer --no-write`.
    pub label: String,
    /// The command line (program and arguments).
    pub command: Vec<String>,
    /// One measurement per repetition, in the order run.
    pub reps: Vec<Measurement>,
    /// Lines in the output CSV of the last repetition (header included), if it wrote one.
    pub output_lines: Option<u64>,
    /// Stage timings the peer wrote with `--timings-json` in its last repetition.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub peer_stages: Option<serde_json::Value>,
}

impl Series {
    /// Median wall time over the repetitions, seconds.
    pub fn median_wall_s(&self) -> Option<f64> {
        median(&self.reps.iter().map(|m| m.wall_s).collect::<Vec<_>>())
    }

    /// Largest peak RSS over the repetitions, KiB (the conservative figure: peak memory
    /// barely varies from run to run, and the target is an upper bound).
    pub fn max_rss_kib(&self) -> Option<u64> {
        self.reps.iter().map(|m| m.max_rss_kib).max()
    }

    /// Largest peak RSS over the repetitions divided by `points`, bytes per point.
    pub fn bytes_per_point(&self, points: u64) -> Option<f64> {
        self.max_rss_kib()
            .map(|k| k as f64 * 1024.0 / points.max(1) as f64)
    }
}

/// One line of the results table.
#[derive(Debug, Clone, Serialize)]
pub struct Row {
    /// Number of points in the data set.
    pub points: u64,
    /// What is compared, e.g. `delaunay` or `neighbourhood k=12`.
    pub method: String,
    /// Median wall time of kinema, seconds (`None` in peer-only runs).
    pub kinema_s: Option<f64>,
    /// Median wall time of the peer, seconds.
    pub peer_s: Option<f64>,
    /// peer_s / kinema_s: how many times faster kinema is.
    pub ratio: Option<f64>,
    /// Peak RSS of kinema per point, bytes.
    pub kinema_bytes_per_point: Option<f64>,
    /// Peak RSS of the peer per point, bytes.
    pub peer_bytes_per_point: Option<f64>,
}

impl Row {
    /// A row comparing `kinema` (if measured) with `peer` on `points` points.
    pub fn compare(points: u64, method: &str, kinema: Option<&Series>, peer: &Series) -> Row {
        let kinema_s = kinema.and_then(Series::median_wall_s);
        let peer_s = peer.median_wall_s();
        let ratio = match (kinema_s, peer_s) {
            (Some(k), Some(p)) if k > 0.0 => Some(p / k),
            _ => None,
        };
        Row {
            points,
            method: method.to_string(),
            kinema_s,
            peer_s,
            ratio,
            kinema_bytes_per_point: kinema.and_then(|s| s.bytes_per_point(points)),
            peer_bytes_per_point: peer.bytes_per_point(points),
        }
    }
}

/// `value` formatted with `decimals` decimals, or an em dash when absent.
fn cell(value: Option<f64>, decimals: usize) -> String {
    value.map_or_else(|| "—".to_string(), |v| format!("{v:.decimals$}"))
}

/// The results as a markdown table.
pub fn markdown_table(rows: &[Row]) -> String {
    let mut s = String::from(
        "| points | method | kinema s | peer s | ratio peer/kinema | kinema B/pt | peer B/pt |\n\
         |---:|---|---:|---:|---:|---:|---:|\n",
    );
    for r in rows {
        s.push_str(&format!(
            "| {} | {} | {} | {} | {} | {} | {} |\n",
            r.points,
            r.method,
            cell(r.kinema_s, 3),
            cell(r.peer_s, 3),
            cell(r.ratio, 2),
            cell(r.kinema_bytes_per_point, 0),
            cell(r.peer_bytes_per_point, 0),
        ));
    }
    s
}
