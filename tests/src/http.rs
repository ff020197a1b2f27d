//! A minimal blocking HTTP/1.1 client over `std::net::TcpStream`, enough to talk to the
//! real `kinema` server in the end-to-end tests (plain HTTP on loopback; one request
//! per connection, `Connection: close`; fixed-length and chunked response bodies).
//!
//! It keeps the test crate free of a full HTTP client stack, and it can also send a
//! request in two halves ([`Pending`]) so that a test can hold a request in flight.

use std::io::{Read, Write};
use std::net::{SocketAddr, TcpStream};
use std::time::Duration;

/// How long a test waits for an answer before it fails.
const READ_TIMEOUT: Duration = Duration::from_secs(60);

/// A response: status, headers (names lowercase) and the body bytes.
#[derive(Debug, Clone)]
pub struct Response {
    /// The status code.
    pub status: u16,
    /// Header names (lowercase) and values, in the order received.
    pub headers: Vec<(String, String)>,
    /// The body, with any chunked transfer coding removed.
    pub body: Vec<u8>,
}

impl Response {
    /// The first value of header `name` (case-insensitive).
    pub fn header(&self, name: &str) -> Option<&str> {
        let name = name.to_ascii_lowercase();
        self.headers
            .iter()
            .find(|(k, _)| *k == name)
            .map(|(_, v)| v.as_str())
    }

    /// The body as text.
    ///
    /// # Panics
    /// When the body is not UTF-8.
    pub fn text(&self) -> String {
        String::from_utf8(self.body.clone()).expect("the response body is UTF-8")
    }

    /// The body parsed as JSON.
    ///
    /// # Panics
    /// When the body is not JSON.
    pub fn json(&self) -> serde_json::Value {
        serde_json::from_slice(&self.body).unwrap_or_else(|e| {
            panic!(
                "the response body is not JSON ({e}): {}",
                String::from_utf8_lossy(&self.body)
            )
        })
    }
}

/// A request to send.
#[derive(Debug, Clone)]
pub struct Request<'a> {
    /// Method, e.g. `GET`.
    pub method: &'a str,
    /// Path and query, e.g. `/v1/structures?limit=2`.
    pub path: &'a str,
    /// Extra headers.
    pub headers: Vec<(&'a str, String)>,
    /// The body (sent with `Content-Length`).
    pub body: Vec<u8>,
}

impl<'a> Request<'a> {
    /// A request without body or headers.
    pub fn new(method: &'a str, path: &'a str) -> Self {
        Self {
            method,
            path,
            headers: Vec::new(),
            body: Vec::new(),
        }
    }

    /// Add a header.
    pub fn header(mut self, name: &'a str, value: impl Into<String>) -> Self {
        self.headers.push((name, value.into()));
        self
    }

    /// Add `Authorization: Bearer <token>`.
    pub fn bearer(self, token: &str) -> Self {
        self.header("authorization", format!("Bearer {token}"))
    }

    /// A JSON body with `Content-Type: application/json`.
    pub fn json(mut self, value: &serde_json::Value) -> Self {
        self.body = value.to_string().into_bytes();
        self.header("content-type", "application/json")
    }

    /// The request head (request line and headers, up to the blank line).
    fn head(&self, addr: SocketAddr) -> String {
        let mut head = format!(
            "{} {} HTTP/1.1\r\nhost: {addr}\r\nconnection: close\r\ncontent-length: {}\r\n",
            self.method,
            self.path,
            self.body.len()
        );
        for (k, v) in &self.headers {
            head.push_str(k);
            head.push_str(": ");
            head.push_str(v);
            head.push_str("\r\n");
        }
        head.push_str("\r\n");
        head
    }

    /// Send the request and read the whole response.
    ///
    /// # Panics
    /// When the connection fails or the response is not HTTP/1.1.
    pub fn send(&self, addr: SocketAddr) -> Response {
        let mut p = self.send_part(addr, self.body.len());
        p.finish()
    }

    /// Send the head and the first `sent` bytes of the body, and return the open
    /// request; [`Pending::finish`] sends the rest and reads the response.
    ///
    /// # Panics
    /// When the connection fails.
    pub fn send_part(&self, addr: SocketAddr, sent: usize) -> Pending {
        let mut stream = TcpStream::connect(addr)
            .unwrap_or_else(|e| panic!("cannot connect to the server at {addr}: {e}"));
        stream
            .set_read_timeout(Some(READ_TIMEOUT))
            .expect("set the read timeout");
        let sent = sent.min(self.body.len());
        let mut first = self.head(addr).into_bytes();
        first.extend_from_slice(&self.body[..sent]);
        stream.write_all(&first).expect("send the request head");
        stream.flush().expect("flush");
        Pending {
            stream,
            rest: self.body[sent..].to_vec(),
        }
    }
}

/// A request whose body is not sent in full yet.
#[derive(Debug)]
pub struct Pending {
    stream: TcpStream,
    rest: Vec<u8>,
}

impl Pending {
    /// Send the rest of the body and read the response.
    ///
    /// # Panics
    /// When the connection fails or the response is not HTTP/1.1.
    pub fn finish(&mut self) -> Response {
        if !self.rest.is_empty() {
            self.stream.write_all(&self.rest).expect("send the body");
            self.stream.flush().expect("flush");
        }
        let mut raw = Vec::new();
        self.stream
            .read_to_end(&mut raw)
            .expect("read the response");
        parse(&raw)
    }
}

impl Pending {
    /// Read the response without sending the rest of the body (for a server that
    /// answers before the body is complete, e.g. on a timeout).
    ///
    /// # Panics
    /// When the connection fails or the response is not HTTP/1.1.
    pub fn finish_without_body(&mut self) -> Response {
        let mut raw = Vec::new();
        self.stream
            .read_to_end(&mut raw)
            .expect("read the response");
        parse(&raw)
    }
}

/// Parse a whole HTTP/1.1 response.
fn parse(raw: &[u8]) -> Response {
    let split = raw
        .windows(4)
        .position(|w| w == b"\r\n\r\n")
        .unwrap_or_else(|| {
            panic!(
                "no complete response head in {:?}",
                String::from_utf8_lossy(raw)
            )
        });
    let head = std::str::from_utf8(&raw[..split]).expect("the response head is ASCII");
    let mut lines = head.split("\r\n");
    let status_line = lines.next().unwrap_or("");
    let status: u16 = status_line
        .split(' ')
        .nth(1)
        .and_then(|s| s.parse().ok())
        .unwrap_or_else(|| panic!("bad status line {status_line:?}"));
    let headers: Vec<(String, String)> = lines
        .filter_map(|l| l.split_once(':'))
        .map(|(k, v)| (k.trim().to_ascii_lowercase(), v.trim().to_owned()))
        .collect();
    let rest = &raw[split + 4..];
    let chunked = headers
        .iter()
        .any(|(k, v)| k == "transfer-encoding" && v.eq_ignore_ascii_case("chunked"));
    let body = if chunked {
        dechunk(rest)
    } else {
        rest.to_vec()
    };
    Response {
        status,
        headers,
        body,
    }
}

/// Remove the chunked transfer coding (RFC 9112 §7.1).
fn dechunk(mut data: &[u8]) -> Vec<u8> {
    let mut out = Vec::new();
    loop {
        let Some(eol) = data.windows(2).position(|w| w == b"\r\n") else {
            panic!("cut-off chunked body");
        };
        let size_line = std::str::from_utf8(&data[..eol]).expect("chunk size is ASCII");
        let size_hex = size_line.split(';').next().unwrap_or("").trim();
        let size = usize::from_str_radix(size_hex, 16)
            .unwrap_or_else(|e| panic!("bad chunk size {size_hex:?}: {e}"));
        data = &data[eol + 2..];
        if size == 0 {
            return out;
        }
        assert!(data.len() >= size + 2, "cut-off chunk");
        out.extend_from_slice(&data[..size]);
        data = &data[size + 2..];
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn chunked_bodies_are_joined() {
        // The example of RFC 9112 §7.1 in spirit: two chunks, then the last chunk.
        let raw = b"HTTP/1.1 200 OK\r\nTransfer-Encoding: chunked\r\n\r\n4\r\nWiki\r\n5;x=y\r\npedia\r\n0\r\n\r\n";
        let r = parse(raw);
        assert_eq!(r.status, 200);
        assert_eq!(r.body, b"Wikipedia");
    }

    #[test]
    fn fixed_length_bodies_and_headers() {
        let raw = b"HTTP/1.1 404 Not Found\r\nContent-Type: application/problem+json\r\ncontent-length: 2\r\n\r\n{}";
        let r = parse(raw);
        assert_eq!(r.status, 404);
        assert_eq!(r.header("Content-Type"), Some("application/problem+json"));
        assert_eq!(r.body, b"{}");
    }
}
