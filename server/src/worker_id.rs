//! Names of the workers of this process (job workers, webhook dispatchers), as they are
//! recorded on the work they claim.

/// A name for this process: host, process ID and a random tag (so that a restarted
/// process with the same ID is another worker), e.g. `bridge-srv-2:4711:3fa1c2`.
pub fn process_name() -> String {
    let host = std::fs::read_to_string("/proc/sys/kernel/hostname")
        .ok()
        .or_else(|| std::env::var("HOSTNAME").ok())
        .map(|h| h.trim().to_owned())
        .filter(|h| !h.is_empty())
        .unwrap_or_else(|| "kinema".to_owned());
    let mut tag = [0u8; 3];
    let tag = match getrandom::fill(&mut tag) {
        Ok(()) => crate::keys::hex(&tag),
        Err(_) => "000000".to_owned(),
    };
    format!("{host}:{}:{tag}", std::process::id())
}

#[cfg(test)]
mod tests {
    use super::process_name;

    #[test]
    fn names_carry_the_process_id_and_differ_between_calls() {
        let (a, b) = (process_name(), process_name());
        assert!(a.contains(&format!(":{}:", std::process::id())), "{a}");
        assert_ne!(a, b);
    }
}
