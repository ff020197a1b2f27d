//! Names of the workers of this process (job workers, webhook dispatchers), as they are
//! recorded on the work they claim.

use std::sync::OnceLock;

/// The name of this process: host, process ID and a random tag (so that a restarted
/// process with the same ID is another worker), e.g. `bridge-srv-2:4711:3fa1c2`; the
/// same for every call in one process.
pub fn process_name() -> &'static str {
    static NAME: OnceLock<String> = OnceLock::new();
    NAME.get_or_init(|| {
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
    })
}

/// The name of this process's worker `index` of `kind` (`jobs`, `webhooks`), unique
/// among the processes on one database: e.g. `bridge-srv-2:4711:3fa1c2/webhooks-0`.
pub fn worker_name(kind: &str, index: usize) -> String {
    format!("{}/{kind}-{index}", process_name())
}

#[cfg(test)]
mod tests {
    use super::{process_name, worker_name};

    #[test]
    fn one_process_name_carries_the_process_id_and_workers_differ_by_kind_and_index() {
        let p = process_name();
        assert_eq!(p, process_name(), "one name per process");
        assert!(p.contains(&format!(":{}:", std::process::id())), "{p}");
        assert_eq!(worker_name("webhooks", 0), format!("{p}/webhooks-0"));
        assert_ne!(worker_name("webhooks", 0), worker_name("webhooks", 1));
        assert_ne!(worker_name("jobs", 0), worker_name("webhooks", 0));
    }
}
