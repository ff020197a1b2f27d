//! In-process counters and histograms, written in the Prometheus text exposition
//! format (version 0.0.4) at `/metrics`.
//!
//! - `kinema_http_requests_total{method,route,status}` and
//!   `kinema_http_request_duration_seconds{method,route}`: every request; `route` is the
//!   matched route template (`/v1/structures/{id}`), never the raw path, so the label
//!   set stays small;
//! - `kinema_batches_ingested_total`, `kinema_readings_ingested_total`: stored sensor
//!   batches and their readings;
//! - `kinema_analysis_duration_seconds{kind,status}`: analyses run.
//!
//! Each server process counts its own requests; Prometheus sums over instances.

use std::collections::BTreeMap;
use std::fmt::Write;
use std::sync::Arc;
use std::sync::Mutex;
use std::sync::atomic::{AtomicU64, Ordering};
use std::time::Instant;

use axum::extract::{MatchedPath, Request, State};
use axum::middleware::Next;
use axum::response::Response;

/// Upper bounds of the latency buckets, seconds.
const BUCKETS: [f64; 12] = [
    0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 5.0, 30.0,
];

/// A cumulative histogram with the fixed [`BUCKETS`].
#[derive(Debug, Default, Clone)]
struct Histogram {
    counts: [u64; BUCKETS.len()],
    count: u64,
    sum: f64,
}

impl Histogram {
    fn observe(&mut self, seconds: f64) {
        for (c, le) in self.counts.iter_mut().zip(BUCKETS) {
            if seconds <= le {
                *c += 1;
            }
        }
        self.count += 1;
        self.sum += seconds;
    }

    fn render(&self, out: &mut String, name: &str, labels: &str) {
        let sep = if labels.is_empty() { "" } else { "," };
        for (c, le) in self.counts.iter().zip(BUCKETS) {
            let _ = writeln!(out, "{name}_bucket{{{labels}{sep}le=\"{le}\"}} {c}");
        }
        let _ = writeln!(
            out,
            "{name}_bucket{{{labels}{sep}le=\"+Inf\"}} {}",
            self.count
        );
        let _ = writeln!(out, "{name}_sum{{{labels}}} {}", self.sum);
        let _ = writeln!(out, "{name}_count{{{labels}}} {}", self.count);
    }
}

/// The service's metrics.
#[derive(Debug, Default)]
pub struct Metrics {
    requests: Mutex<BTreeMap<(String, String, u16), u64>>,
    latency: Mutex<BTreeMap<(String, String), Histogram>>,
    analyses: Mutex<BTreeMap<(String, String), Histogram>>,
    batches: AtomicU64,
    readings: AtomicU64,
}

/// Escape a label value (backslash, quote, newline).
fn label(v: &str) -> String {
    v.replace('\\', "\\\\")
        .replace('"', "\\\"")
        .replace('\n', "\\n")
}

impl Metrics {
    /// Count one request.
    pub fn request(&self, method: &str, route: &str, status: u16, seconds: f64) {
        if let Ok(mut m) = self.requests.lock() {
            *m.entry((method.to_owned(), route.to_owned(), status))
                .or_default() += 1;
        }
        if let Ok(mut m) = self.latency.lock() {
            m.entry((method.to_owned(), route.to_owned()))
                .or_default()
                .observe(seconds);
        }
    }

    /// Count one stored sensor batch of `readings` readings.
    pub fn batch_ingested(&self, readings: u64) {
        self.batches.fetch_add(1, Ordering::Relaxed);
        self.readings.fetch_add(readings, Ordering::Relaxed);
    }

    /// Record one analysis of `kind` (`epoch`, `series`) that ended with `status`.
    pub fn analysis(&self, kind: &str, status: &str, seconds: f64) {
        if let Ok(mut m) = self.analyses.lock() {
            m.entry((kind.to_owned(), status.to_owned()))
                .or_default()
                .observe(seconds);
        }
    }

    /// Everything, in the Prometheus text format.
    pub fn render(&self) -> String {
        let mut out = String::new();
        out.push_str("# HELP kinema_http_requests_total HTTP requests answered.\n");
        out.push_str("# TYPE kinema_http_requests_total counter\n");
        if let Ok(m) = self.requests.lock() {
            for ((method, route, status), n) in m.iter() {
                let _ = writeln!(
                    out,
                    "kinema_http_requests_total{{method=\"{}\",route=\"{}\",status=\"{status}\"}} {n}",
                    label(method),
                    label(route)
                );
            }
        }
        out.push_str("# HELP kinema_http_request_duration_seconds Time to answer a request.\n");
        out.push_str("# TYPE kinema_http_request_duration_seconds histogram\n");
        if let Ok(m) = self.latency.lock() {
            for ((method, route), h) in m.iter() {
                let labels = format!("method=\"{}\",route=\"{}\"", label(method), label(route));
                h.render(&mut out, "kinema_http_request_duration_seconds", &labels);
            }
        }
        out.push_str("# HELP kinema_batches_ingested_total Sensor batches stored.\n");
        out.push_str("# TYPE kinema_batches_ingested_total counter\n");
        let _ = writeln!(
            out,
            "kinema_batches_ingested_total {}",
            self.batches.load(Ordering::Relaxed)
        );
        out.push_str(
            "# HELP kinema_readings_ingested_total Readings stored from sensor batches.\n",
        );
        out.push_str("# TYPE kinema_readings_ingested_total counter\n");
        let _ = writeln!(
            out,
            "kinema_readings_ingested_total {}",
            self.readings.load(Ordering::Relaxed)
        );
        out.push_str(
            "# HELP kinema_analysis_duration_seconds Time to run and store an analysis.\n",
        );
        out.push_str("# TYPE kinema_analysis_duration_seconds histogram\n");
        if let Ok(m) = self.analyses.lock() {
            for ((kind, status), h) in m.iter() {
                let labels = format!("kind=\"{}\",status=\"{}\"", label(kind), label(status));
                h.render(&mut out, "kinema_analysis_duration_seconds", &labels);
            }
        }
        out
    }
}

/// The method label: the standard methods by name, any other (extension) method as
/// `OTHER`, so that clients cannot grow the label set without bound.
fn method_label(m: &axum::http::Method) -> &'static str {
    use axum::http::Method;
    match *m {
        Method::GET => "GET",
        Method::POST => "POST",
        Method::PUT => "PUT",
        Method::DELETE => "DELETE",
        Method::PATCH => "PATCH",
        Method::HEAD => "HEAD",
        Method::OPTIONS => "OPTIONS",
        _ => "OTHER",
    }
}

/// Middleware: count the request and its latency under its route template.
pub async fn record(State(metrics): State<Arc<Metrics>>, req: Request, next: Next) -> Response {
    let method = method_label(req.method()).to_owned();
    let route = req
        .extensions()
        .get::<MatchedPath>()
        .map_or("unmatched", |p| p.as_str())
        .to_owned();
    let t0 = Instant::now();
    let resp = next.run(req).await;
    metrics.request(
        &method,
        &route,
        resp.status().as_u16(),
        t0.elapsed().as_secs_f64(),
    );
    resp
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn histogram_buckets_are_cumulative() {
        let m = Metrics::default();
        m.request("GET", "/healthz", 200, 0.003);
        m.request("GET", "/healthz", 200, 2.0);
        let text = m.render();
        assert!(text.contains(
            "kinema_http_requests_total{method=\"GET\",route=\"/healthz\",status=\"200\"} 2"
        ));
        assert!(text.contains("route=\"/healthz\",le=\"0.0025\"} 0"));
        assert!(text.contains("route=\"/healthz\",le=\"0.005\"} 1"));
        assert!(text.contains("route=\"/healthz\",le=\"5\"} 2"));
        assert!(text.contains("route=\"/healthz\",le=\"+Inf\"} 2"));
    }

    #[test]
    fn extension_methods_share_one_label() {
        let odd = axum::http::Method::from_bytes(b"FROBNICATE").expect("a method");
        assert_eq!(method_label(&odd), "OTHER");
        assert_eq!(method_label(&axum::http::Method::PUT), "PUT");
    }

    #[test]
    fn label_values_are_escaped() {
        assert_eq!(label("a\"b\\c\nd"), "a\\\"b\\\\c\\nd");
    }
}
