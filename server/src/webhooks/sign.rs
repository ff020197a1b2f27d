//! Signing secrets and the signature of a webhook request.
//!
//! Every request carries `Kinema-Timestamp: <Unix seconds of this attempt>` and
//! `Kinema-Signature: sha256=<lowercase hex of HMAC-SHA256(secret, "{timestamp}.{body}")>`
//! (HMAC: RFC 2104; SHA-256: FIPS 180-4). The key is the secret string's UTF-8 bytes
//! exactly as shown when the subscription was created (prefix included); the body is
//! the raw request body bytes. Signing the timestamp with the body lets a receiver
//! refuse an old request replayed by someone who captured it.

use hmac::{Hmac, Mac};
use sha2::Sha256;

use crate::keys::hex;

/// Prefix of every signing secret (plain, so that a leaked secret is recognisable).
pub const SECRET_PREFIX: &str = "kn_hooksec_";

/// Header: the event's stable ID (the same on every attempt and on a replay).
pub const EVENT_ID: &str = "kinema-event-id";
/// Header: the event type, e.g. `analysis.finished`.
pub const EVENT_TYPE: &str = "kinema-event-type";
/// Header: the delivery's ID (a replay is a new delivery of the same event).
pub const DELIVERY_ID: &str = "kinema-delivery-id";
/// Header: this attempt's number within the delivery, from 1.
pub const DELIVERY_ATTEMPT: &str = "kinema-delivery-attempt";
/// Header: when this attempt was signed, Unix seconds (UTC).
pub const TIMESTAMP: &str = "kinema-timestamp";
/// Header: `sha256=<hex>`, see [`signature`].
pub const SIGNATURE: &str = "kinema-signature";

type HmacSha256 = Hmac<Sha256>;

/// A new signing secret: [`SECRET_PREFIX`] and 64 lowercase hex digits (256 random bits
/// from the operating system).
///
/// Errors: the operating system's random source failed.
pub fn new_secret() -> Result<String, getrandom::Error> {
    let mut raw = [0u8; 32];
    getrandom::fill(&mut raw)?;
    Ok(format!("{SECRET_PREFIX}{}", hex(&raw)))
}

/// HMAC-SHA256 of `msg` under `key` (RFC 2104 with SHA-256).
pub fn hmac_sha256(key: &[u8], msg: &[u8]) -> [u8; 32] {
    let mut mac = keyed(key);
    mac.update(msg);
    mac.finalize().into_bytes().into()
}

/// The MAC state under `key`.
fn keyed(key: &[u8]) -> HmacSha256 {
    HmacSha256::new_from_slice(key).expect("HMAC takes a key of any length (RFC 2104 §2)")
}

/// The value of the `Kinema-Signature` header for a request sent at `timestamp` (Unix
/// seconds) with `body`: `sha256=` and the lowercase hex of
/// HMAC-SHA256(`secret`, `"{timestamp}.{body}"`).
pub fn signature(secret: &str, timestamp: i64, body: &[u8]) -> String {
    format!(
        "sha256={}",
        hex(&hmac_sha256(secret.as_bytes(), &signed(timestamp, body)))
    )
}

/// The signed message: the timestamp in decimal, a full stop, the body.
fn signed(timestamp: i64, body: &[u8]) -> Vec<u8> {
    let mut msg = Vec::with_capacity(body.len() + 21);
    msg.extend_from_slice(timestamp.to_string().as_bytes());
    msg.push(b'.');
    msg.extend_from_slice(body);
    msg
}

/// Why a received request does not verify.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum VerifyError {
    /// The signature header is not `sha256=` and 64 hex digits.
    #[error("the signature header is not `sha256=` followed by 64 hex digits")]
    Malformed,
    /// The HMAC does not match: another secret, or a changed body or timestamp.
    #[error("the signature does not match the body and timestamp")]
    Mismatch,
    /// The timestamp is further from the receiver's clock than the tolerance.
    #[error(
        "the timestamp is {skew_secs} s away from now, more than the {tolerance_secs} s allowed"
    )]
    Stale {
        /// How far the timestamp is from now, seconds.
        skew_secs: i64,
        /// The tolerance, seconds.
        tolerance_secs: i64,
    },
}

/// What a receiver does, for tests and Rust receivers: recompute the HMAC over the raw
/// body, compare in constant time, and refuse a timestamp more than `tolerance_secs`
/// away from `now` (Unix seconds).
pub fn verify(
    secret: &str,
    timestamp: i64,
    body: &[u8],
    header: &str,
    now: i64,
    tolerance_secs: i64,
) -> Result<(), VerifyError> {
    let digits = header
        .strip_prefix("sha256=")
        .ok_or(VerifyError::Malformed)?;
    if digits.len() != 64 || !digits.bytes().all(|b| b.is_ascii_hexdigit()) {
        return Err(VerifyError::Malformed);
    }
    let mut expected = [0u8; 32];
    for (i, b) in expected.iter_mut().enumerate() {
        *b = digits
            .get(2 * i..2 * i + 2)
            .and_then(|h| u8::from_str_radix(h, 16).ok())
            .ok_or(VerifyError::Malformed)?;
    }
    let mut mac = keyed(secret.as_bytes());
    mac.update(&signed(timestamp, body));
    // `verify_slice` compares in constant time.
    mac.verify_slice(&expected)
        .map_err(|_| VerifyError::Mismatch)?;
    let skew = now.saturating_sub(timestamp).saturating_abs();
    if skew > tolerance_secs {
        return Err(VerifyError::Stale {
            skew_secs: skew,
            tolerance_secs,
        });
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn unhex(s: &str) -> Vec<u8> {
        (0..s.len())
            .step_by(2)
            .map(|i| u8::from_str_radix(&s[i..i + 2], 16).expect("test vectors are hex"))
            .collect()
    }

    #[test]
    fn hmac_sha256_matches_rfc_4231() {
        // RFC 4231 §4.2–4.8, the HMAC-SHA-256 lines of test cases 1–4, 6 and 7 (case 5
        // checks a truncated output, which is not used here).
        let cases: [(Vec<u8>, Vec<u8>, &str); 6] = [
            (
                vec![0x0b; 20],
                b"Hi There".to_vec(),
                "b0344c61d8db38535ca8afceaf0bf12b881dc200c9833da726e9376c2e32cff7",
            ),
            (
                b"Jefe".to_vec(),
                b"what do ya want for nothing?".to_vec(),
                "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843",
            ),
            (
                vec![0xaa; 20],
                vec![0xdd; 50],
                "773ea91e36800e46854db8ebd09181a72959098b3ef8c122d9635514ced565fe",
            ),
            (
                unhex("0102030405060708090a0b0c0d0e0f10111213141516171819"),
                vec![0xcd; 50],
                "82558a389a443c0ea4cc819899f2083a85f0faa3e578f8077a2e3ff46729665b",
            ),
            (
                vec![0xaa; 131],
                b"Test Using Larger Than Block-Size Key - Hash Key First".to_vec(),
                "60e431591ee0b67f0d8a26aacbf5b77f8e0bc6213728c5140546040f0ee37f54",
            ),
            (
                vec![0xaa; 131],
                b"This is a test using a larger than block-size key and a larger than \
block-size data. The key needs to be hashed before being used by the HMAC algorithm."
                    .to_vec(),
                "9b09ffa71b942fcb27635fbcd5b0e944bfdc63644f0713938a7f51535c3a35e2",
            ),
        ];
        for (key, data, want) in cases {
            assert_eq!(hex(&hmac_sha256(&key, &data)), want);
        }
    }

    #[test]
    fn the_header_signs_timestamp_dot_body() {
        // Built by hand from the primitive checked above: the message is the decimal
        // timestamp, '.', then the body bytes.
        let body = br#"{"id":"e1"}"#;
        let want = format!(
            "sha256={}",
            hex(&hmac_sha256(
                b"kn_hooksec_00",
                b"1700000000.{\"id\":\"e1\"}"
            ))
        );
        assert_eq!(signature("kn_hooksec_00", 1_700_000_000, body), want);
        // Another timestamp, body or secret gives another signature.
        assert_ne!(signature("kn_hooksec_00", 1_700_000_001, body), want);
        assert_ne!(signature("kn_hooksec_00", 1_700_000_000, b"{}"), want);
        assert_ne!(signature("kn_hooksec_01", 1_700_000_000, body), want);
    }

    #[test]
    fn the_header_matches_python_hmac() {
        // Outside reference: Python's standard library `hmac` and `hashlib`.
        let secret = "kn_hooksec_4f1d9a";
        let ts = 1_767_225_600_i64;
        let body = "{\"type\":\"alert.raised\",\"note\":\"Zürich ☂\"}";
        let script = "import hmac,hashlib,sys;\
k=sys.argv[1].encode();m=(sys.argv[2]+'.'+sys.argv[3]).encode();\
print('sha256='+hmac.new(k,m,hashlib.sha256).hexdigest())";
        let out = match std::process::Command::new("python3")
            .args(["-c", script, secret, &ts.to_string(), body])
            .output()
        {
            Ok(o) => o,
            Err(e) => panic!("running python3 (the outside reference of this test): {e}"),
        };
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        let python = String::from_utf8(out.stdout).expect("python prints ASCII");
        assert_eq!(python.trim(), signature(secret, ts, body.as_bytes()));
    }

    #[test]
    fn verify_accepts_its_own_signature_and_refuses_changes() {
        let s = "kn_hooksec_ab";
        let body = b"{\"a\":1}";
        let sig = signature(s, 1000, body);
        assert_eq!(verify(s, 1000, body, &sig, 1000, 300), Ok(()));
        assert_eq!(verify(s, 1000, body, &sig, 1300, 300), Ok(()));
        assert_eq!(
            verify(s, 1000, body, &sig, 1301, 300),
            Err(VerifyError::Stale {
                skew_secs: 301,
                tolerance_secs: 300
            })
        );
        assert_eq!(
            verify(s, 1000, b"{\"a\":2}", &sig, 1000, 300),
            Err(VerifyError::Mismatch)
        );
        assert_eq!(
            verify(s, 1001, body, &sig, 1001, 300),
            Err(VerifyError::Mismatch)
        );
        assert_eq!(
            verify("kn_hooksec_ac", 1000, body, &sig, 1000, 300),
            Err(VerifyError::Mismatch)
        );
        assert_eq!(
            verify(s, 1000, body, &sig[7..], 1000, 300),
            Err(VerifyError::Malformed)
        );
        assert_eq!(
            verify(s, 1000, body, "sha256=zz", 1000, 300),
            Err(VerifyError::Malformed)
        );
    }

    #[test]
    fn secrets_are_random_and_prefixed() {
        let a = new_secret().expect("random source");
        let b = new_secret().expect("random source");
        assert_ne!(a, b);
        assert!(a.starts_with(SECRET_PREFIX));
        assert_eq!(a.len(), SECRET_PREFIX.len() + 64);
        assert!(
            a[SECRET_PREFIX.len()..]
                .chars()
                .all(|c| c.is_ascii_hexdigit() && !c.is_ascii_uppercase())
        );
    }
}
