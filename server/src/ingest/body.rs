//! The request body as the parsers read it: counted against the size limit and hashed
//! (SHA-256) as it streams through.

use std::io::{self, Read};

use sha2::{Digest, Sha256};

use crate::keys::hex;

/// A reader that counts and hashes what passes through and fails once more than
/// `limit` bytes have come.
pub struct BodyReader<R> {
    inner: R,
    hasher: Sha256,
    bytes: u64,
    limit: u64,
    over: bool,
}

impl<R> BodyReader<R> {
    /// Bytes read so far.
    pub fn read_so_far(&self) -> u64 {
        self.bytes
    }
}

impl<R: Read> BodyReader<R> {
    /// Wrap `inner`, allowing at most `limit` bytes.
    pub fn new(inner: R, limit: u64) -> Self {
        Self {
            inner,
            hasher: Sha256::new(),
            bytes: 0,
            limit,
            over: false,
        }
    }

    /// Whether the body went over the limit (then every read fails).
    pub fn over_limit(&self) -> bool {
        self.over
    }

    /// Read the rest of the body (so that the hash covers all of it); then the hash
    /// (lowercase hex) and the size.
    pub fn finish(&mut self) -> io::Result<(String, u64)> {
        io::copy(self, &mut io::sink())?;
        Ok((hex(&self.hasher.finalize_reset()), self.bytes))
    }
}

impl<R: Read> Read for BodyReader<R> {
    fn read(&mut self, buf: &mut [u8]) -> io::Result<usize> {
        if self.over {
            return Err(io::Error::other("the body is over the size limit"));
        }
        let n = self.inner.read(buf)?;
        self.bytes += n as u64;
        if self.bytes > self.limit {
            self.over = true;
            return Err(io::Error::other("the body is over the size limit"));
        }
        self.hasher.update(&buf[..n]);
        Ok(n)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hashes_what_passes_and_stops_at_the_limit() {
        // FIPS 180-2, appendix B.1: SHA-256("abc").
        let mut r = BodyReader::new(&b"abc"[..], 3);
        let mut s = String::new();
        r.read_to_string(&mut s).expect("within the limit");
        let (h, n) = r.finish().expect("finish");
        assert_eq!(
            h,
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
        assert_eq!(n, 3);
        let mut r = BodyReader::new(&b"abcd"[..], 3);
        assert!(r.read_to_end(&mut Vec::new()).is_err());
        assert!(r.over_limit());
    }
}
