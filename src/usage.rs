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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn counters_grow_with_what_the_process_does() {
        let before = process_io().expect("/proc/self/io on Linux");
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("x");
        std::fs::write(&path, vec![7u8; 1 << 20]).unwrap();
        assert_eq!(std::fs::read(&path).unwrap().len(), 1 << 20);
        let after = process_io().unwrap();
        assert!(after.wchar >= before.wchar + (1 << 20));
        assert!(after.rchar >= before.rchar + (1 << 20));
        // 64 MiB touched page by page must show in the peak.
        let mut v = vec![0u8; 64 << 20];
        for i in (0..v.len()).step_by(4096) {
            v[i] = 1;
        }
        assert!(peak_rss_bytes().unwrap() >= 64 << 20);
        assert_eq!(v.iter().step_by(4096).filter(|&&b| b == 1).count(), 16384);
        drop(v);

        // The peak starts over when reset (in the same test, so that the
        // 64 MiB above is not held by a test running beside this one).
        let mut v = vec![0u8; 96 << 20];
        for i in (0..v.len()).step_by(4096) {
            v[i] = 1;
        }
        let high = peak_rss_bytes().unwrap();
        assert!(high >= 96 << 20);
        drop(v);
        if !reset_peak_rss() {
            println!("skipped: this kernel cannot reset the peak RSS");
            return;
        }
        // Other tests of this process may hold memory, but not the 96 MiB.
        assert!(peak_rss_bytes().unwrap() < high - (64 << 20));
    }
}
