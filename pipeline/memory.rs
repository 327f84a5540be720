//! The memory this process may still use, as the system states it: what sizes the first pass's and
//! the bootstrap's thread pools, and what the feasibility estimate is judged against.

fn first_number(text: &str, key: &str) -> Option<u64> {
    text.lines().find_map(|l| l.strip_prefix(key)).and_then(|rest| rest.split_whitespace().next()).and_then(|v| v.parse().ok())
}

/// The memory this process may still use, in bytes, where the system says: the least of the
/// kernel's MemAvailable, the address-space limit less what is mapped, and a cgroup v2 limit.
pub fn available_bytes() -> Option<u64> {
    let mut limits = Vec::new();
    if let Ok(meminfo) = std::fs::read_to_string("/proc/meminfo") {
        limits.extend(first_number(&meminfo, "MemAvailable:").map(|kb| kb * 1024));
    }
    if let Ok(text) = std::fs::read_to_string("/proc/self/limits") {
        let address_space = text
            .lines()
            .find_map(|l| l.strip_prefix("Max address space"))
            .and_then(|rest| rest.split_whitespace().next())
            .and_then(|v| v.parse::<u64>().ok());
        if let Some(limit) = address_space {
            let mapped = std::fs::read_to_string("/proc/self/status").ok().and_then(|s| first_number(&s, "VmSize:")).unwrap_or(0) * 1024;
            limits.push(limit.saturating_sub(mapped));
        }
    }
    if let Ok(text) = std::fs::read_to_string("/sys/fs/cgroup/memory.max") {
        limits.extend(text.trim().parse::<u64>().ok());
    }
    limits.into_iter().min()
}
