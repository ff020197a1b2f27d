//! One HTTP attempt of a delivery: a signed `POST` of the event body, within the
//! timeout, to an address the allow-list allows.
//!
//! - A literal address in the URL is checked before connecting; a host name is
//!   resolved by [`AllowedResolver`], which hands the HTTP client only allowed
//!   addresses, so the connection cannot be steered to a denied one by DNS.
//! - Redirects are not followed (a 3xx is a failed attempt) and no proxy is used (a
//!   proxy would connect on the service's behalf, past the allow-list).
//! - A 2xx answer is a delivery; anything else (another status, a refused connection,
//!   a timeout, a denied address) is a failed attempt with the status code and a short
//!   error: at most [`MAX_SNIPPET`] characters of the answer's body are kept.

use std::error::Error as StdError;
use std::net::SocketAddr;
use std::sync::Arc;
use std::time::{Duration, Instant};

use reqwest::dns::{Addrs, Name, Resolve, Resolving};
use reqwest::header::{CONTENT_TYPE, HeaderMap, HeaderValue};
use reqwest::redirect::Policy;
use time::OffsetDateTime;
use uuid::Uuid;

use super::WebhookSettings;
use super::policy::{self, AllowList, SETTING};
use super::sign;
use crate::model::{EventType, now_utc};

/// Most characters of a failed answer's body kept in the delivery log.
pub const MAX_SNIPPET: usize = 200;

/// Longest error text kept in the delivery log, characters.
const MAX_ERROR: usize = 400;

/// The `User-Agent` of every request: `kinema/<version>`.
pub const USER_AGENT: &str = concat!("kinema/", env!("CARGO_PKG_VERSION"));

/// What one attempt sends.
#[derive(Debug, Clone, Copy)]
pub struct Outgoing<'a> {
    /// The subscription's URL.
    pub url: &'a str,
    /// The subscription's signing secret.
    pub secret: &'a str,
    /// The event's stable ID.
    pub event_id: Uuid,
    /// The event's type.
    pub event_type: EventType,
    /// The delivery's ID.
    pub delivery_id: Uuid,
    /// This attempt's number within the delivery, from 1.
    pub attempt: u32,
    /// The body: the stored event body's JSON bytes, the same on every attempt.
    pub body: &'a [u8],
}

/// How an attempt went.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Attempt {
    /// When it started, UTC (its `Kinema-Timestamp` is this in Unix seconds).
    pub at: OffsetDateTime,
    /// The receiver's HTTP status, when it answered.
    pub status_code: Option<u16>,
    /// Why it failed; `None` when the receiver answered 2xx.
    pub error: Option<String>,
    /// How long it took.
    pub duration: Duration,
}

impl Attempt {
    /// True when the receiver answered 2xx.
    pub fn delivered(&self) -> bool {
        self.error.is_none()
    }
}

/// The HTTP client of the dispatchers, with the allow-list built in.
#[derive(Debug, Clone)]
pub struct Sender {
    client: reqwest::Client,
    allow: Arc<AllowList>,
    timeout: Duration,
}

/// The HTTP client could not be built (its TLS set-up failed).
#[derive(Debug, thiserror::Error)]
#[error("the webhook HTTP client could not be set up: {0}")]
pub struct SetupError(#[from] reqwest::Error);

impl Sender {
    /// A client with `settings`' allow-list and timeout, no redirects and no proxy.
    pub fn new(settings: &WebhookSettings) -> Result<Self, SetupError> {
        let allow = Arc::new(settings.allow.clone());
        let client = reqwest::Client::builder()
            .user_agent(USER_AGENT)
            .redirect(Policy::none())
            .no_proxy()
            .timeout(settings.timeout)
            .connect_timeout(settings.timeout)
            .dns_resolver(AllowedResolver {
                allow: allow.clone(),
            })
            .build()?;
        Ok(Self {
            client,
            allow,
            timeout: settings.timeout,
        })
    }

    /// Make one attempt. Never fails: every problem is a failed [`Attempt`].
    pub async fn send(&self, out: &Outgoing<'_>) -> Attempt {
        let at = now_utc();
        let started = Instant::now();
        let (status_code, error) = match self.post(out, at).await {
            Ok(code) => (Some(code), None),
            Err(Failure { status, error }) => (status, Some(error)),
        };
        Attempt {
            at,
            status_code,
            error,
            duration: started.elapsed(),
        }
    }

    /// The status of a 2xx answer, or why the attempt failed.
    async fn post(&self, out: &Outgoing<'_>, at: OffsetDateTime) -> Result<u16, Failure> {
        let url =
            policy::check_url(out.url, &self.allow).map_err(|e| Failure::new(e.to_string()))?;
        let timestamp = at.unix_timestamp();
        let headers = headers(out, timestamp).map_err(Failure::new)?;
        let resp = self
            .client
            .post(url)
            .headers(headers)
            .body(out.body.to_vec())
            .send()
            .await
            .map_err(|e| Failure::new(describe(&e, self.timeout)))?;
        let status = resp.status();
        if status.is_success() {
            return Ok(status.as_u16());
        }
        let line = match status.canonical_reason() {
            Some(r) => format!("HTTP {} {r}", status.as_u16()),
            None => format!("HTTP {}", status.as_u16()),
        };
        let error = if status.is_redirection() {
            format!("{line}: redirects are not followed; point the subscription at the final URL")
        } else {
            match snippet(resp).await {
                s if s.is_empty() => line,
                s => format!("{line}: {s}"),
            }
        };
        Err(Failure {
            status: Some(status.as_u16()),
            error,
        })
    }
}

struct Failure {
    status: Option<u16>,
    error: String,
}

impl Failure {
    fn new(error: String) -> Self {
        Self {
            status: None,
            error: truncate(&error, MAX_ERROR),
        }
    }
}

/// The headers of an attempt (see [`sign`]).
fn headers(out: &Outgoing<'_>, timestamp: i64) -> Result<HeaderMap, String> {
    let mut h = HeaderMap::new();
    let mut put = |name: &'static str, value: String| -> Result<(), String> {
        let v = HeaderValue::from_str(&value).map_err(|_| format!("header {name} is not valid"))?;
        h.insert(name, v);
        Ok(())
    };
    put(sign::EVENT_ID, out.event_id.to_string())?;
    put(sign::EVENT_TYPE, out.event_type.as_str().to_owned())?;
    put(sign::DELIVERY_ID, out.delivery_id.to_string())?;
    put(sign::DELIVERY_ATTEMPT, out.attempt.to_string())?;
    put(sign::TIMESTAMP, timestamp.to_string())?;
    put(
        sign::SIGNATURE,
        sign::signature(out.secret, timestamp, out.body),
    )?;
    h.insert(CONTENT_TYPE, HeaderValue::from_static("application/json"));
    Ok(h)
}

/// The start of a failed answer's body, one line, at most [`MAX_SNIPPET`] characters;
/// at most a few KiB are read.
async fn snippet(mut resp: reqwest::Response) -> String {
    let mut buf = Vec::new();
    while buf.len() < 4 * MAX_SNIPPET {
        match resp.chunk().await {
            Ok(Some(c)) => buf.extend_from_slice(&c),
            _ => break,
        }
    }
    let text = String::from_utf8_lossy(&buf);
    let one_line = text
        .chars()
        .map(|c| if c.is_control() { ' ' } else { c })
        .collect::<String>()
        .split_whitespace()
        .collect::<Vec<_>>()
        .join(" ");
    truncate(&one_line, MAX_SNIPPET)
}

/// `s` cut to `max` characters, with `…` when cut.
fn truncate(s: &str, max: usize) -> String {
    if s.chars().count() <= max {
        return s.to_owned();
    }
    let mut out: String = s.chars().take(max.saturating_sub(1)).collect();
    out.push('…');
    out
}

/// A client error as one line: a timeout, or the distinct messages of its causes.
fn describe(e: &reqwest::Error, timeout: Duration) -> String {
    if e.is_timeout() {
        return format!("no answer within {} ms (timed out)", timeout.as_millis());
    }
    let mut parts: Vec<String> = Vec::new();
    let mut cause: Option<&(dyn StdError + 'static)> = Some(e);
    while let Some(c) = cause {
        let m = c.to_string();
        if !parts.iter().any(|p| p.contains(&m)) {
            parts.push(m);
        }
        cause = c.source();
    }
    parts.join(": ")
}

/// A DNS resolver that hands the HTTP client only addresses the allow-list allows;
/// a name with none is an error naming the denied addresses.
#[derive(Debug, Clone)]
pub struct AllowedResolver {
    allow: Arc<AllowList>,
}

impl AllowedResolver {
    /// A resolver over `allow`.
    pub fn new(allow: Arc<AllowList>) -> Self {
        Self { allow }
    }

    /// Resolve `host` with the system resolver and keep the allowed addresses.
    pub async fn lookup(&self, host: &str) -> Result<Vec<SocketAddr>, Unreachable> {
        let found: Vec<SocketAddr> = tokio::net::lookup_host((host, 0))
            .await
            .map_err(|e| Unreachable {
                host: host.to_owned(),
                detail: format!("cannot be resolved: {e}"),
            })?
            .collect();
        let (allowed, denied): (Vec<&SocketAddr>, Vec<&SocketAddr>) =
            found.iter().partition(|a| self.allow.check(a.ip()).is_ok());
        if allowed.is_empty() {
            let why: Vec<String> = denied
                .iter()
                .filter_map(|a| self.allow.check(a.ip()).err())
                .map(|d| format!("{} is {}", d.ip, d.reason))
                .collect();
            return Err(Unreachable {
                host: host.to_owned(),
                detail: if why.is_empty() {
                    "resolves to no address".to_owned()
                } else {
                    format!(
                        "resolves only to addresses the webhook allow-list ({SETTING}) does not allow: {}",
                        why.join("; ")
                    )
                },
            });
        }
        if !denied.is_empty() {
            tracing::debug!(
                host,
                ?denied,
                "webhook: skipping addresses the allow-list denies"
            );
        }
        Ok(allowed.into_iter().copied().collect())
    }
}

/// A host with no address the allow-list allows.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{host} {detail}")]
pub struct Unreachable {
    /// The host name.
    pub host: String,
    /// Why.
    pub detail: String,
}

impl Resolve for AllowedResolver {
    fn resolve(&self, name: Name) -> Resolving {
        let this = self.clone();
        let host = name.as_str().to_owned();
        Box::pin(async move {
            let addrs = this.lookup(&host).await?;
            let it: Addrs = Box::new(addrs.into_iter());
            Ok(it)
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn long_texts_are_cut_with_an_ellipsis() {
        assert_eq!(truncate("abc", 3), "abc");
        assert_eq!(truncate("abcd", 3), "ab…");
        assert_eq!(truncate("ääää", 3).chars().count(), 3);
    }

    #[tokio::test]
    async fn a_name_that_resolves_to_loopback_is_not_handed_out() {
        // `localhost` resolves to loopback (RFC 6761 §6.3), which the default denies.
        let r = AllowedResolver::new(Arc::new(AllowList::default()));
        let e = r.lookup("localhost").await.expect_err("loopback is denied");
        assert!(e.detail.contains(SETTING), "{e}");
        assert!(e.detail.contains("loopback"), "{e}");
        let open = AllowedResolver::new(Arc::new("127.0.0.0/8,::1/128".parse().expect("parses")));
        let got = open.lookup("localhost").await.expect("allowed on purpose");
        assert!(got.iter().all(|a| a.ip().is_loopback()), "{got:?}");
    }
}
