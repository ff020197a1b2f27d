//! Which destinations webhooks may reach: the URL rules and the address allow-list
//! (setting `KINEMA_WEBHOOK_ALLOW`).
//!
//! By default only public unicast addresses are allowed: a subscription must not turn
//! the service into a way to reach its own host, the networks behind it, or a cloud
//! metadata endpoint. Denied are the special-purpose ranges of the IANA IPv4 and IPv6
//! special-purpose address registries (RFC 6890) that are not globally reachable —
//! loopback, private (RFC 1918), shared CGNAT space (RFC 6598), link-local (RFC 3927,
//! including `169.254.169.254`), unique-local (RFC 4193), multicast, unspecified,
//! documentation (RFC 5737, RFC 3849) and the others listed in [`special`] — every IPv6
//! address outside global unicast `2000::/3` (RFC 4291), and the IPv4-mapped forms
//! (`::ffff:a.b.c.d`) of the denied IPv4 addresses.
//!
//! The allow-list is a comma-separated list of entries:
//! - a CIDR block (`10.20.0.0/16`, `127.0.0.1/32`, `::1/128`; a bare address is a
//!   block of one), allowed on purpose even when it is in a denied range;
//! - `public`: public unicast addresses (the default; implied unless `none` is given);
//! - `none`: no public address, only the blocks listed (`none,10.20.0.0/16` = only that
//!   on-premises network).
//!
//! The literal address of a URL is checked when a subscription is made; at send time the
//! host name is resolved and only allowed addresses are connected to (see
//! [`super::send`]), so that a name that later resolves elsewhere (DNS rebinding) cannot
//! reach a denied address.

use std::fmt;
use std::net::{IpAddr, Ipv4Addr, Ipv6Addr};
use std::str::FromStr;

use reqwest::Url;

/// Name of the setting, for messages.
pub const SETTING: &str = "KINEMA_WEBHOOK_ALLOW";

/// Longest webhook URL, characters.
pub const MAX_URL_LEN: usize = 2048;

/// An IPv4 or IPv6 network: an address and a prefix length.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Cidr {
    addr: IpAddr,
    prefix: u8,
}

impl Cidr {
    /// The block `addr/prefix`; `None` when the prefix is longer than the address or
    /// `addr` has bits set past the prefix.
    pub fn new(addr: IpAddr, prefix: u8) -> Option<Self> {
        let c = Self { addr, prefix };
        let bits = match addr {
            IpAddr::V4(_) => 32,
            IpAddr::V6(_) => 128,
        };
        (prefix <= bits && c.network() == addr).then_some(c)
    }

    /// The block's first address.
    fn network(&self) -> IpAddr {
        match self.addr {
            IpAddr::V4(a) => IpAddr::V4(Ipv4Addr::from(u32::from(a) & mask32(self.prefix))),
            IpAddr::V6(a) => IpAddr::V6(Ipv6Addr::from(u128::from(a) & mask128(self.prefix))),
        }
    }

    /// Whether `ip` is in the block (an IPv4 address is never in an IPv6 block and
    /// the other way round; canonicalise with [`canonical`] first).
    pub fn contains(&self, ip: IpAddr) -> bool {
        match (self.addr, ip) {
            (IpAddr::V4(net), IpAddr::V4(a)) => {
                let m = mask32(self.prefix);
                u32::from(net) & m == u32::from(a) & m
            }
            (IpAddr::V6(net), IpAddr::V6(a)) => {
                let m = mask128(self.prefix);
                u128::from(net) & m == u128::from(a) & m
            }
            _ => false,
        }
    }
}

fn mask32(prefix: u8) -> u32 {
    match prefix {
        0 => 0,
        p => u32::MAX << (32 - u32::from(p.min(32))),
    }
}

fn mask128(prefix: u8) -> u128 {
    match prefix {
        0 => 0,
        p => u128::MAX << (128 - u32::from(p.min(128))),
    }
}

impl fmt::Display for Cidr {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}/{}", self.addr, self.prefix)
    }
}

/// Why an allow-list entry does not parse.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum AllowListError {
    /// Not an address, a CIDR block, `public` or `none`.
    #[error(
        "{SETTING}: {0:?} is not a CIDR block (like 10.20.0.0/16 or ::1/128), `public` or `none`"
    )]
    Entry(String),
    /// A prefix longer than the address.
    #[error(
        "{SETTING}: the prefix of {0:?} is longer than the address (at most 32 for IPv4, 128 for IPv6)"
    )]
    Prefix(String),
    /// Bits set past the prefix (`10.20.1.0/16`).
    #[error("{SETTING}: {given:?} has bits set past its prefix; the block is {network}")]
    HostBits {
        /// The entry.
        given: String,
        /// The block it probably means.
        network: String,
    },
    /// Both `public` and `none`.
    #[error("{SETTING}: `public` and `none` contradict each other; give one of them")]
    Contradiction,
}

/// The destinations webhooks may reach. `Default` allows public unicast addresses only.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct AllowList {
    /// Whether public unicast addresses are allowed (`public`, the default; `none`
    /// turns it off).
    pub public: bool,
    /// Blocks allowed on purpose, whatever range they are in.
    pub blocks: Vec<Cidr>,
}

impl Default for AllowList {
    fn default() -> Self {
        Self {
            public: true,
            blocks: Vec::new(),
        }
    }
}

impl FromStr for AllowList {
    type Err = AllowListError;

    /// Parse the comma-separated form (see the module notes); an empty string is the
    /// default (`public`).
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let (mut public, mut none) = (false, false);
        let mut blocks = Vec::new();
        for entry in s.split(',').map(str::trim).filter(|e| !e.is_empty()) {
            match entry.to_ascii_lowercase().as_str() {
                "public" => public = true,
                "none" => none = true,
                _ => blocks.push(parse_cidr(entry)?),
            }
        }
        if public && none {
            return Err(AllowListError::Contradiction);
        }
        Ok(Self {
            public: !none,
            blocks,
        })
    }
}

impl fmt::Display for AllowList {
    /// The comma-separated form that parses back to this list.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(if self.public { "public" } else { "none" })?;
        for b in &self.blocks {
            write!(f, ",{b}")?;
        }
        Ok(())
    }
}

fn parse_cidr(entry: &str) -> Result<Cidr, AllowListError> {
    let (addr, prefix) = match entry.split_once('/') {
        Some((a, p)) => (a, Some(p)),
        None => (entry, None),
    };
    let addr: IpAddr = addr
        .parse()
        .map_err(|_| AllowListError::Entry(entry.to_owned()))?;
    let bits = if addr.is_ipv4() { 32 } else { 128 };
    let prefix = match prefix {
        None => bits,
        Some(p) if !p.is_empty() && p.bytes().all(|b| b.is_ascii_digit()) => p
            .parse::<u8>()
            .ok()
            .filter(|&n| n <= bits)
            .ok_or_else(|| AllowListError::Prefix(entry.to_owned()))?,
        Some(_) => return Err(AllowListError::Entry(entry.to_owned())),
    };
    let c = Cidr::new(addr, prefix).ok_or_else(|| AllowListError::HostBits {
        given: entry.to_owned(),
        network: Cidr { addr, prefix }.network().to_string() + "/" + &prefix.to_string(),
    })?;
    // An IPv4-mapped IPv6 block means its IPv4 block: addresses are compared in their
    // IPv4 form (see `canonical`).
    Ok(match c.addr {
        IpAddr::V6(a) if prefix >= 96 => a
            .to_ipv4_mapped()
            .and_then(|v4| Cidr::new(IpAddr::V4(v4), prefix - 96))
            .unwrap_or(c),
        _ => c,
    })
}

/// An address as it is checked: an IPv4-mapped IPv6 address (`::ffff:a.b.c.d`, RFC 4291
/// §2.5.5.2) becomes its IPv4 address, since that is the host it reaches.
pub fn canonical(ip: IpAddr) -> IpAddr {
    match ip {
        IpAddr::V6(a) => a.to_ipv4_mapped().map_or(ip, IpAddr::V4),
        v4 => v4,
    }
}

/// Why an address is denied.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{ip} is {reason}, which the webhook allow-list ({SETTING}) does not allow")]
pub struct Denied {
    /// The address, as checked.
    pub ip: IpAddr,
    /// The range it is in, with its source (e.g. `a private address (RFC 1918)`).
    pub reason: String,
}

impl AllowList {
    /// Ok when webhooks may connect to `ip`: it is in a listed block, or it is a public
    /// unicast address and the list allows those.
    pub fn check(&self, ip: IpAddr) -> Result<(), Denied> {
        let ip = canonical(ip);
        if self.blocks.iter().any(|b| b.contains(ip)) {
            return Ok(());
        }
        match special(ip) {
            Some(reason) => Err(Denied {
                ip,
                reason: reason.to_owned(),
            }),
            None if self.public => Ok(()),
            None => Err(Denied {
                ip,
                reason: "a public address (the list says `none`)".to_owned(),
            }),
        }
    }
}

/// IPv4 ranges that are not public unicast, with their source (IANA IPv4 Special-Purpose
/// Address Registry, RFC 6890, and the RFC of each range).
const V4_SPECIAL: &[([u8; 4], u8, &str)] = &[
    (
        [0, 0, 0, 0],
        8,
        "in \"this network\" 0.0.0.0/8, incl. the unspecified address (RFC 1122 §3.2.1.3)",
    ),
    ([10, 0, 0, 0], 8, "a private address (RFC 1918)"),
    (
        [100, 64, 0, 0],
        10,
        "a shared (carrier-grade NAT) address (RFC 6598)",
    ),
    ([127, 0, 0, 0], 8, "a loopback address (RFC 1122 §3.2.1.3)"),
    (
        [169, 254, 0, 0],
        16,
        "a link-local address, the range of cloud metadata services (RFC 3927)",
    ),
    ([172, 16, 0, 0], 12, "a private address (RFC 1918)"),
    (
        [192, 0, 0, 0],
        24,
        "an IETF protocol assignment address (RFC 6890)",
    ),
    ([192, 0, 2, 0], 24, "a documentation address (RFC 5737)"),
    (
        [192, 88, 99, 0],
        24,
        "a 6to4 relay anycast address (RFC 7526)",
    ),
    ([192, 168, 0, 0], 16, "a private address (RFC 1918)"),
    ([198, 18, 0, 0], 15, "a benchmarking address (RFC 2544)"),
    ([198, 51, 100, 0], 24, "a documentation address (RFC 5737)"),
    ([203, 0, 113, 0], 24, "a documentation address (RFC 5737)"),
    ([224, 0, 0, 0], 4, "a multicast address (RFC 5771)"),
    (
        [240, 0, 0, 0],
        4,
        "a reserved address, incl. the limited broadcast 255.255.255.255 (RFC 1112, RFC 919)",
    ),
];

/// IPv6 ranges inside or beside `2000::/3` that are not public unicast, with their
/// source (IANA IPv6 Special-Purpose Address Registry, RFC 6890, and the RFC of each).
const V6_SPECIAL: &[(u128, u8, &str)] = &[
    (0, 128, "the unspecified address (RFC 4291)"),
    (1, 128, "the loopback address (RFC 4291)"),
    (
        0x0064_ff9b_0001_0000_0000_0000_0000_0000,
        48,
        "a local-use NAT64 address (RFC 8215)",
    ),
    (
        0x0100_0000_0000_0000_0000_0000_0000_0000,
        64,
        "a discard-only address (RFC 6666)",
    ),
    (
        0x2001_0000_0000_0000_0000_0000_0000_0000,
        23,
        "an IETF protocol assignment address, incl. Teredo (RFC 2928, RFC 4380)",
    ),
    (
        0x2001_0db8_0000_0000_0000_0000_0000_0000,
        32,
        "a documentation address (RFC 3849)",
    ),
    (
        0x2002_0000_0000_0000_0000_0000_0000_0000,
        16,
        "a 6to4 address, which embeds an IPv4 address (RFC 3056)",
    ),
    (
        0x3fff_0000_0000_0000_0000_0000_0000_0000,
        20,
        "a documentation address (RFC 9637)",
    ),
    (
        0xfc00_0000_0000_0000_0000_0000_0000_0000,
        7,
        "a unique-local address (RFC 4193)",
    ),
    (
        0xfe80_0000_0000_0000_0000_0000_0000_0000,
        10,
        "a link-local address (RFC 4291)",
    ),
    (
        0xfec0_0000_0000_0000_0000_0000_0000_0000,
        10,
        "a site-local address (deprecated, RFC 3879)",
    ),
    (
        0xff00_0000_0000_0000_0000_0000_0000_0000,
        8,
        "a multicast address (RFC 4291)",
    ),
];

/// The well-known NAT64 prefix `64:ff9b::/96` (RFC 6052): its addresses reach the IPv4
/// address in their last 32 bits.
const NAT64: u128 = 0x0064_ff9b_0000_0000_0000_0000_0000_0000;

/// The range `ip` is in when it is not a public unicast address (`None` when it is one).
pub fn special(ip: IpAddr) -> Option<&'static str> {
    match canonical(ip) {
        IpAddr::V4(a) => {
            let n = u32::from(a);
            V4_SPECIAL
                .iter()
                .find(|(net, p, _)| n & mask32(*p) == u32::from_be_bytes(*net))
                .map(|(_, _, why)| *why)
        }
        IpAddr::V6(a) => {
            let n = u128::from(a);
            if let Some((_, _, why)) = V6_SPECIAL
                .iter()
                .find(|(net, p, _)| n & mask128(*p) == *net)
            {
                return Some(why);
            }
            if n & mask128(96) == NAT64 {
                // The IPv4 address it translates to decides.
                let v4 = Ipv4Addr::from((n & 0xffff_ffff) as u32);
                return special(IpAddr::V4(v4))
                    .map(|_| "the NAT64 form (RFC 6052) of an IPv4 address that is not public");
            }
            if n >> 125 != 0b001 {
                return Some("not a global unicast address (outside 2000::/3, RFC 4291)");
            }
            None
        }
    }
}

/// Why a webhook URL is refused.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum UrlError {
    /// Longer than [`MAX_URL_LEN`].
    #[error("a webhook URL has at most {MAX_URL_LEN} characters, this one has {0}")]
    TooLong(usize),
    /// Not an absolute URL.
    #[error("not an absolute URL: {0}")]
    Parse(String),
    /// A scheme other than http or https.
    #[error("the scheme must be http or https, not {0:?}")]
    Scheme(String),
    /// A user name or password in the URL.
    #[error("a webhook URL must not hold a user name or password; requests are signed instead")]
    Userinfo,
    /// A fragment, which is never sent.
    #[error("a URL fragment (#…) is never sent to the server; leave it out")]
    Fragment,
    /// No host.
    #[error("the URL has no host")]
    NoHost,
    /// A literal address (or `localhost`) that the allow-list does not allow.
    #[error("{0}; allow a block on purpose by adding it to {SETTING}")]
    Denied(Denied),
}

/// Check a webhook URL when a subscription is made: length, http(s), no user name or
/// password, no fragment, a host; a literal IP address (or a `localhost` name, RFC 6761)
/// must be allowed by `allow`. A host name is checked when it is resolved, at send time.
pub fn check_url(raw: &str, allow: &AllowList) -> Result<Url, UrlError> {
    let n = raw.chars().count();
    if n > MAX_URL_LEN {
        return Err(UrlError::TooLong(n));
    }
    let url = Url::parse(raw).map_err(|e| UrlError::Parse(e.to_string()))?;
    if !matches!(url.scheme(), "http" | "https") {
        return Err(UrlError::Scheme(url.scheme().to_owned()));
    }
    if !url.username().is_empty() || url.password().is_some() {
        return Err(UrlError::Userinfo);
    }
    if url.fragment().is_some() {
        return Err(UrlError::Fragment);
    }
    match literal_host(&url)? {
        Host::Ip(ip) => allow.check(ip).map_err(UrlError::Denied)?,
        Host::Localhost => {
            let v4 = allow.check(IpAddr::V4(Ipv4Addr::LOCALHOST));
            let v6 = allow.check(IpAddr::V6(Ipv6Addr::LOCALHOST));
            if let (Err(e), Err(_)) = (v4, v6) {
                return Err(UrlError::Denied(e));
            }
        }
        Host::Name => {}
    }
    Ok(url)
}

/// What the host of a URL is.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Host {
    /// A literal address (IPv6 without its brackets).
    Ip(IpAddr),
    /// `localhost` or a name under `.localhost` (RFC 6761 §6.3: loopback).
    Localhost,
    /// Any other name, checked when it is resolved.
    Name,
}

/// The host of `url`.
pub fn literal_host(url: &Url) -> Result<Host, UrlError> {
    let host = url
        .host_str()
        .filter(|h| !h.is_empty())
        .ok_or(UrlError::NoHost)?;
    let bare = host
        .strip_prefix('[')
        .and_then(|h| h.strip_suffix(']'))
        .unwrap_or(host);
    if let Ok(ip) = bare.parse::<IpAddr>() {
        return Ok(Host::Ip(ip));
    }
    let name = host.trim_end_matches('.').to_ascii_lowercase();
    if name == "localhost" || name.ends_with(".localhost") {
        return Ok(Host::Localhost);
    }
    Ok(Host::Name)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ip(s: &str) -> IpAddr {
        s.parse().expect("test addresses parse")
    }

    fn default_denies(addr: &str, source: &str) {
        let e = AllowList::default()
            .check(ip(addr))
            .expect_err("must be denied by default");
        assert!(
            e.reason.contains(source),
            "{addr}: reason {:?} should cite {source}",
            e.reason
        );
    }

    #[test]
    fn rfc_1918_private_ranges_are_denied_at_both_ends() {
        // RFC 1918 §3: 10/8, 172.16/12, 192.168/16.
        for a in [
            "10.0.0.0",
            "10.255.255.255",
            "172.16.0.0",
            "172.31.255.255",
            "192.168.0.0",
            "192.168.255.255",
        ] {
            default_denies(a, "RFC 1918");
        }
        // Just outside them: public.
        for a in [
            "9.255.255.255",
            "11.0.0.0",
            "172.15.255.255",
            "172.32.0.0",
            "192.167.255.255",
            "192.169.0.0",
        ] {
            assert_eq!(AllowList::default().check(ip(a)), Ok(()), "{a}");
        }
    }

    #[test]
    fn rfc_6598_shared_space_is_denied() {
        // RFC 6598 §7: 100.64.0.0/10.
        default_denies("100.64.0.0", "RFC 6598");
        default_denies("100.127.255.255", "RFC 6598");
        assert_eq!(AllowList::default().check(ip("100.63.255.255")), Ok(()));
        assert_eq!(AllowList::default().check(ip("100.128.0.0")), Ok(()));
    }

    #[test]
    fn rfc_3927_link_local_and_the_metadata_address_are_denied() {
        // RFC 3927 §2.1: 169.254.0.0/16; 169.254.169.254 is where cloud metadata
        // services answer (common practice).
        default_denies("169.254.169.254", "RFC 3927");
        default_denies("169.254.0.1", "RFC 3927");
        assert_eq!(AllowList::default().check(ip("169.253.255.255")), Ok(()));
    }

    #[test]
    fn loopback_unspecified_multicast_and_broadcast_are_denied() {
        default_denies("127.0.0.1", "loopback");
        default_denies("127.255.255.254", "loopback");
        default_denies("0.0.0.0", "unspecified");
        default_denies("224.0.0.1", "multicast");
        default_denies("239.255.255.255", "multicast");
        default_denies("255.255.255.255", "broadcast");
        default_denies("::1", "loopback");
        default_denies("::", "unspecified");
        default_denies("ff02::1", "multicast");
    }

    #[test]
    fn documentation_ranges_are_denied() {
        // RFC 5737 §3 (TEST-NET-1, -2, -3) and RFC 3849 (2001:db8::/32).
        default_denies("192.0.2.1", "RFC 5737");
        default_denies("198.51.100.7", "RFC 5737");
        default_denies("203.0.113.255", "RFC 5737");
        default_denies("2001:db8::1", "RFC 3849");
        default_denies("2001:db8:ffff:ffff:ffff:ffff:ffff:ffff", "RFC 3849");
    }

    #[test]
    fn rfc_4193_unique_local_and_ipv6_link_local_are_denied() {
        // RFC 4193 §3.1: fc00::/7 (fc00:: to fdff:…); RFC 4291 §2.5.6: fe80::/10.
        default_denies("fc00::1", "RFC 4193");
        default_denies("fd12:3456:789a::1", "RFC 4193");
        default_denies("fe80::1", "link-local");
        default_denies("febf::1", "link-local");
        default_denies("fec0::1", "site-local");
    }

    #[test]
    fn ipv6_outside_global_unicast_and_embedding_forms_are_denied() {
        default_denies("4000::1", "2000::/3");
        default_denies("2002:c000:0201::1", "6to4");
        default_denies("2001::1", "Teredo");
        default_denies("64:ff9b::7f00:1", "NAT64");
        default_denies("64:ff9b::a00:1", "NAT64");
        // NAT64 of a public IPv4 address, and ordinary global unicast: allowed.
        assert_eq!(AllowList::default().check(ip("64:ff9b::808:808")), Ok(()));
        assert_eq!(AllowList::default().check(ip("2a00:1450:4001::1")), Ok(()));
        assert_eq!(AllowList::default().check(ip("2600::1")), Ok(()));
    }

    #[test]
    fn ipv4_mapped_forms_are_checked_as_ipv4() {
        // RFC 4291 §2.5.5.2: ::ffff:a.b.c.d is the IPv4 host a.b.c.d.
        for a in [
            "::ffff:127.0.0.1",
            "::ffff:10.1.2.3",
            "::ffff:169.254.169.254",
            "::ffff:192.168.1.1",
        ] {
            let e = AllowList::default().check(ip(a)).expect_err(a);
            assert!(e.ip.is_ipv4(), "{a} checked as {}", e.ip);
        }
        assert_eq!(AllowList::default().check(ip("::ffff:8.8.8.8")), Ok(()));
        let list: AllowList = "127.0.0.1/32".parse().expect("parses");
        assert_eq!(list.check(ip("::ffff:127.0.0.1")), Ok(()));
    }

    #[test]
    fn public_addresses_are_allowed_by_default() {
        for a in [
            "8.8.8.8",
            "1.1.1.1",
            "93.184.216.34",
            "100.128.0.1",
            "223.255.255.255",
        ] {
            assert_eq!(AllowList::default().check(ip(a)), Ok(()), "{a}");
        }
    }

    #[test]
    fn listed_blocks_are_allowed_on_purpose() {
        let list: AllowList = "10.20.0.0/16, 127.0.0.1/32, ::1/128"
            .parse()
            .expect("parses");
        assert!(list.public);
        assert_eq!(list.check(ip("10.20.3.4")), Ok(()));
        assert_eq!(list.check(ip("127.0.0.1")), Ok(()));
        assert_eq!(list.check(ip("::1")), Ok(()));
        assert_eq!(list.check(ip("8.8.8.8")), Ok(()));
        assert!(list.check(ip("10.21.0.1")).is_err());
        assert!(list.check(ip("127.0.0.2")).is_err());
        assert_eq!(list.to_string(), "public,10.20.0.0/16,127.0.0.1/32,::1/128");
    }

    #[test]
    fn none_allows_only_the_listed_blocks() {
        let list: AllowList = "none,10.20.0.0/16".parse().expect("parses");
        assert!(!list.public);
        assert_eq!(list.check(ip("10.20.255.255")), Ok(()));
        let e = list.check(ip("8.8.8.8")).expect_err("public is off");
        assert!(e.reason.contains("none"), "{e}");
        assert!(e.to_string().contains(SETTING));
        let nothing: AllowList = "none".parse().expect("parses");
        assert!(nothing.check(ip("8.8.8.8")).is_err());
        assert_eq!("".parse::<AllowList>(), Ok(AllowList::default()));
        assert_eq!("public".parse::<AllowList>(), Ok(AllowList::default()));
    }

    #[test]
    fn bad_entries_are_refused_with_the_setting_name() {
        for (entry, want) in [
            (
                "10.20.0.0/33",
                AllowListError::Prefix("10.20.0.0/33".into()),
            ),
            ("::1/129", AllowListError::Prefix("::1/129".into())),
            ("10.20.0.0/", AllowListError::Entry("10.20.0.0/".into())),
            ("10.20.0.0/x", AllowListError::Entry("10.20.0.0/x".into())),
            ("intranet", AllowListError::Entry("intranet".into())),
            ("10.20.0/16", AllowListError::Entry("10.20.0/16".into())),
            (
                "10.20.1.0/16",
                AllowListError::HostBits {
                    given: "10.20.1.0/16".into(),
                    network: "10.20.0.0/16".into(),
                },
            ),
            ("public,none", AllowListError::Contradiction),
        ] {
            let got = entry.parse::<AllowList>().expect_err(entry);
            assert_eq!(got, want, "{entry}");
            assert!(got.to_string().contains(SETTING));
        }
    }

    #[test]
    fn cidr_blocks_match_their_prefix() {
        let c = parse_cidr("172.16.0.0/12").expect("parses");
        assert!(c.contains(ip("172.31.0.1")));
        assert!(!c.contains(ip("172.32.0.1")));
        assert!(!c.contains(ip("::ffff:172.16.0.1")), "canonicalise before");
        let all = parse_cidr("0.0.0.0/0").expect("parses");
        assert!(all.contains(ip("255.1.2.3")));
        let v6 = parse_cidr("2001:db8:aa::/48").expect("parses");
        assert!(v6.contains(ip("2001:db8:aa:ffff::1")));
        assert!(!v6.contains(ip("2001:db8:ab::1")));
        // An IPv4-mapped block is its IPv4 block.
        assert_eq!(
            parse_cidr("::ffff:10.0.0.0/104").expect("parses"),
            parse_cidr("10.0.0.0/8").expect("parses")
        );
    }

    #[test]
    fn urls_are_checked_for_scheme_userinfo_length_and_literal_addresses() {
        let d = AllowList::default();
        assert!(check_url("https://hooks.example.com/kinema?x=1", &d).is_ok());
        assert!(check_url("http://8.8.8.8:8080/in", &d).is_ok());
        assert!(
            matches!(check_url("ftp://example.com/", &d), Err(UrlError::Scheme(s)) if s == "ftp")
        );
        assert!(matches!(
            check_url("file:///etc/passwd", &d),
            Err(UrlError::Scheme(_))
        ));
        assert_eq!(
            check_url("https://u:p@example.com/", &d),
            Err(UrlError::Userinfo)
        );
        assert_eq!(
            check_url("https://u@example.com/", &d),
            Err(UrlError::Userinfo)
        );
        assert_eq!(
            check_url("https://example.com/#x", &d),
            Err(UrlError::Fragment)
        );
        assert!(matches!(
            check_url("example.com/hook", &d),
            Err(UrlError::Parse(_))
        ));
        let long = format!("https://example.com/{}", "a".repeat(MAX_URL_LEN));
        assert_eq!(
            check_url(&long, &d),
            Err(UrlError::TooLong(MAX_URL_LEN + 20))
        );
        for denied in [
            "http://127.0.0.1:9000/",
            "http://[::1]/",
            "http://169.254.169.254/latest/meta-data/",
            "http://[::ffff:10.0.0.1]/",
            "http://10.1.2.3/",
            // WHATWG URL parsing reads these as 127.0.0.1.
            "http://0x7f.1/",
            "http://2130706433/",
            "http://localhost:8080/",
            "http://api.localhost/",
        ] {
            let e = check_url(denied, &d).expect_err(denied);
            assert!(matches!(e, UrlError::Denied(_)), "{denied}: {e}");
            assert!(e.to_string().contains(SETTING), "{e}");
        }
        let local: AllowList = "127.0.0.1/32".parse().expect("parses");
        assert!(check_url("http://127.0.0.1:9000/", &local).is_ok());
        assert!(check_url("http://localhost:9000/", &local).is_ok());
    }
}
