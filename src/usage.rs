//! What the process has used so far, from the kernel's accounting: peak
//! resident memory and bytes read and written. Linux only; elsewhere the
//! figures are absent rather than made up.

use serde::Serialize;

/// Bytes the process moved, as `/proc/self/io` counts them.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize)]
pub struct ProcessIo {
    /// Bytes fetched from storage devices (page cache misses).
    pub read_bytes: u64,
    /// Bytes sent towards storage devices (written back or to be).
    pub write_bytes: u64,
    /// Bytes passed to read-like system calls, from the cache or not.
    pub rchar: u64,
    /// Bytes passed to write-like system calls.
    pub wchar: u64,
}

/// The process's I/O counters, when the kernel exposes them.
pub fn process_io() -> Option<ProcessIo> {
    let text = std::fs::read_to_string("/proc/self/io").ok()?;
    let field = |name: &str| -> Option<u64> {
        text.lines()
            .find_map(|l| l.strip_prefix(name)?.strip_prefix(':'))
            .and_then(|v| v.trim().parse().ok())
    };
    Some(ProcessIo {
        read_bytes: field("read_bytes")?,
        write_bytes: field("write_bytes")?,
        rchar: field("rchar")?,
        wchar: field("wchar")?,
    })
}

/// The peak resident set size of the process in bytes (`VmHWM`).
pub fn peak_rss_bytes() -> Option<u64> {
    let text = std::fs::read_to_string("/proc/self/status").ok()?;
    let kib: u64 = text
        .lines()
        .find_map(|l| l.strip_prefix("VmHWM:"))?
        .trim()
        .strip_suffix("kB")?
        .trim()
        .parse()
        .ok()?;
    Some(kib * 1024)
}

/// Starts the peak resident set size over from the current size, so that
/// a later [`peak_rss_bytes`] measures one step of a longer process (the
/// demo's multiplication after generating its operands). Returns whether
/// the kernel took it (Linux 4.0 and later: `5` to `/proc/self/clear_refs`).
pub fn reset_peak_rss() -> bool {
    std::fs::write("/proc/self/clear_refs", "5").is_ok()
}

// The tests run in a process of their own (tests/usage.rs): the peak
// memory they check must not include what other tests hold.
