//! The memory this process may still use, as the system states it: what sizes the first pass's and
//! the bootstrap's thread pools, and what the feasibility estimate is judged against; and handing
//! freed memory back to the system between phases.

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

/// Hands memory freed by a finished phase back to the system before the next phase allocates its
/// own. glibc's allocator keeps freed blocks below its mmap threshold (which rises to 32 MiB as
/// large blocks are freed) in its heaps, so the first pass's column buffers would otherwise stay
/// resident beside the matrices. Elsewhere a no-op.
pub fn return_freed_memory() {
    #[cfg(all(target_os = "linux", target_env = "gnu"))]
    {
        extern "C" {
            fn malloc_trim(pad: usize) -> std::ffi::c_int;
        }
        // SAFETY: malloc_trim only releases free memory of glibc's own heaps; it touches no live
        // allocation and is safe to call from any thread at any time.
        unsafe {
            malloc_trim(0);
        }
    }
}
