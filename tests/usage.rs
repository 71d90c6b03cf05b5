//! The process accounting of `vastmul::usage`, alone in its test binary so
//! that no other test's memory shows in the peaks it checks.

use vastmul::usage::{peak_rss_bytes, process_io, reset_peak_rss};

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
    // Without a use, an optimised build may drop the writes.
    std::hint::black_box(&mut v);
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
