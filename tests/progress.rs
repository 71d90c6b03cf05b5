//! The progress display as a person sees it: bars under a pseudo-terminal
//! (run through `script`, which gives the child a terminal of its own),
//! timestamped lines when stderr is a pipe, and silence with `--quiet`.

mod common;

use common::journal_step;
use std::path::Path;
use std::process::{Command, Output};

const BIN: &str = env!("CARGO_BIN_EXE_vastmul");

/// Two operands large enough that an out-of-core run under 16 MiB lasts
/// long enough for several redraws (about a second here).
fn operands(dir: &Path) {
    for (name, seed) in [("a.txt", "5"), ("b.txt", "6")] {
        let o = Command::new(BIN)
            .args(["gen", "--digits", "4000000", "--seed", seed, "-o", name])
            .current_dir(dir)
            .output()
            .unwrap();
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    }
}

const MUL: &[&str] = &["mul", "a.txt", "b.txt", "-o", "c.txt", "--memory", "16MiB"];

/// How many passes `MUL` plans in `dir` (it depends on the prime set the
/// CPU or VASTMUL_KERNEL selects), from `vastmul plan --json`.
fn planned_passes(dir: &Path) -> usize {
    let o = Command::new(BIN)
        .current_dir(dir)
        .args(["plan", "a.txt", "b.txt", "--memory", "16MiB", "--json"])
        .output()
        .unwrap();
    assert!(o.status.success(), "{o:?}");
    let plan: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    plan["passes"].as_array().expect("passes in the plan").len()
}

/// Runs `args` under a pseudo-terminal; `None` when `script` is missing.
fn under_pty(dir: &Path, args: &[&str]) -> Option<Output> {
    // A known width, so that the screen below matches the terminal's.
    let line = std::iter::once("stty cols 100 rows 40;")
        .chain(std::iter::once(BIN))
        .chain(args.iter().copied())
        .collect::<Vec<_>>()
        .join(" ");
    Command::new("script")
        .args(["-qec", &line, "/dev/null"])
        .current_dir(dir)
        .env("TERM", "xterm")
        .output()
        .ok()
}

/// The terminal's final screen lines: carriage returns and cursor moves
/// rewrite lines, erase-line escapes clear them.
fn screen(raw: &str) -> Vec<String> {
    let mut lines: Vec<Vec<char>> = vec![Vec::new()];
    let (mut row, mut col) = (0usize, 0usize);
    let mut chars = raw.chars().peekable();
    while let Some(c) = chars.next() {
        match c {
            '\r' => col = 0,
            '\n' => {
                row += 1;
                col = 0;
            }
            '\u{1b}' if chars.peek() == Some(&'[') => {
                chars.next();
                let mut seq = String::new();
                for d in chars.by_ref() {
                    seq.push(d);
                    if d.is_ascii_alphabetic() {
                        break;
                    }
                }
                let (arg, op) = seq.split_at(seq.len().saturating_sub(1));
                let n: usize = arg.parse().unwrap_or(1);
                match op {
                    "A" => row = row.saturating_sub(n),
                    "B" => row += n,
                    "K" => {
                        if let Some(l) = lines.get_mut(row) {
                            l.clear();
                        }
                    }
                    _ => {}
                }
            }
            c => {
                while lines.len() <= row {
                    lines.push(Vec::new());
                }
                let l = &mut lines[row];
                while l.len() < col {
                    l.push(' ');
                }
                if col < l.len() {
                    l[col] = c;
                } else {
                    l.push(c);
                }
                col += 1;
            }
        }
        while lines.len() <= row {
            lines.push(Vec::new());
        }
    }
    lines
        .into_iter()
        .map(|l| l.into_iter().collect::<String>().trim_end().to_string())
        .filter(|l| !l.is_empty())
        .collect()
}

#[test]
fn bars_appear_on_a_terminal_and_are_cleared_at_the_end() {
    let t = tempfile::tempdir().unwrap();
    operands(t.path());
    let Some(o) = under_pty(t.path(), MUL) else {
        println!("skipped: `script` is not installed, no pseudo-terminal to test with");
        return;
    };
    assert!(o.status.success(), "{o:?}");
    let raw = String::from_utf8_lossy(&o.stdout);
    assert!(!raw.contains("panicked at"), "{raw}");
    // What was drawn: both bars, with a pass position, rates and ETAs.
    assert!(raw.contains("overall ["), "no overall bar in {raw}");
    // Some pass's bar: a pass shorter than the display's redraw interval
    // may end before its bar is drawn, so no particular one is required.
    let n = planned_passes(t.path());
    assert!(
        (1..=n).any(|k| raw.contains(&format!("pass {k}/{n} ["))),
        "no pass bar in {raw}"
    );
    assert!(raw.contains("ETA"), "{raw}");
    assert!(
        raw.contains("\u{1b}[2K"),
        "bars are redrawn in place: {raw}"
    );
    // What stays on the screen: the completed passes, then the summary as
    // the last line, with no bar left behind.
    let shown = screen(&raw);
    let last = shown.last().expect("something on screen");
    assert!(
        last.starts_with("wrote c.txt"),
        "last line {last:?} of {shown:#?}"
    );
    assert!(
        !shown.iter().any(|l| l.contains("overall [")),
        "a bar was left on the screen: {shown:#?}"
    );
    assert!(
        shown
            .iter()
            .any(|l| l.contains(&format!("done pass {n}/{n} write the product"))),
        "{shown:#?}"
    );
    assert!(Path::new(&t.path().join("c.txt")).exists());
}

#[test]
fn plain_timestamped_lines_without_a_terminal() {
    let t = tempfile::tempdir().unwrap();
    operands(t.path());
    let o = Command::new(BIN)
        .args(MUL)
        .current_dir(t.path())
        .env("VASTMUL_PROGRESS_EVERY", "0.05")
        .output()
        .unwrap();
    assert!(o.status.success(), "{o:?}");
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        !err.contains('\u{1b}'),
        "escape codes off a terminal: {err}"
    );
    assert!(!err.contains('\r'), "{err}");
    let stamped = |l: &str| {
        let b = l.as_bytes();
        l.len() > 21
            && b[4] == b'-'
            && b[7] == b'-'
            && b[10] == b'T'
            && b[13] == b':'
            && b[16] == b':'
            && b[19] == b'Z'
            && l[..4].parse::<u32>().is_ok_and(|y| y >= 2024)
            && l[20..].starts_with(" vastmul: ")
    };
    let lines: Vec<&str> = err.lines().collect();
    let (last, log) = lines.split_last().unwrap();
    assert!(last.starts_with("wrote c.txt"), "{err}");
    assert!(log.iter().all(|l| stamped(l)), "unstamped line in {err}");
    // Status lines at the steady rate, with the pass and the whole run.
    let status: Vec<&&str> = log
        .iter()
        .filter(|l| l.contains("; overall ") && l.contains("%, "))
        .collect();
    assert!(status.len() >= 3, "{err}");
    assert!(status.iter().any(|l| l.contains("pass ETA")), "{err}");
    // One line per completed pass, in order.
    let n = planned_passes(t.path());
    for i in 1..=n {
        let needle = format!("done pass {i}/{n} ");
        assert!(log.iter().any(|l| l.contains(&needle)), "{needle} in {err}");
    }
}

#[test]
fn quiet_silences_bars_lines_and_summary() {
    let t = tempfile::tempdir().unwrap();
    operands(t.path());
    let mut args = MUL.to_vec();
    args.push("--quiet");
    let o = Command::new(BIN)
        .args(&args)
        .current_dir(t.path())
        .env("VASTMUL_PROGRESS_EVERY", "0.05")
        .output()
        .unwrap();
    assert!(o.status.success(), "{o:?}");
    assert!(
        o.stderr.is_empty(),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    std::fs::remove_file(t.path().join("c.txt")).unwrap();
    if let Some(o) = under_pty(t.path(), &args) {
        assert!(o.status.success(), "{o:?}");
        assert!(
            o.stdout.is_empty(),
            "{}",
            String::from_utf8_lossy(&o.stdout)
        );
    } else {
        println!("skipped: the terminal half (`script` is not installed)");
    }
    // Errors still show.
    let o = Command::new(BIN)
        .args(&args)
        .current_dir(t.path())
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(4));
    assert!(String::from_utf8_lossy(&o.stderr).contains("c.txt"));
}

/// The overall percentage of a status line (`...; overall 41.5%, ...`).
fn overall_percent(line: &str) -> Option<f64> {
    let rest = &line[line.find("; overall ")? + 10..];
    rest[..rest.find('%')?].parse().ok()
}

#[test]
fn after_a_resume_the_display_starts_where_the_run_stopped() {
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    operands(d);
    // Stopped by SIGINT once the rows of the first prime are under way
    // (journal step 2), so the columns of A and of B for prime 0 are done.
    if !interrupt_under(d, &[("VASTMUL_PROGRESS_EVERY", "0.05")]) {
        println!("skipped: the run finished before it could be interrupted");
        return;
    }

    let o = Command::new(BIN)
        .args(MUL)
        .current_dir(d)
        .env("VASTMUL_PROGRESS_EVERY", "0.05")
        .output()
        .unwrap();
    assert!(o.status.success(), "{o:?}");
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("resuming from"), "{err}");
    // The passes the first run completed are reported as done before, not
    // as done in no time.
    let n = planned_passes(t.path());
    for pass in [
        format!("pass 1/{n} columns of A"),
        format!("pass 2/{n} columns of B, prime 0"),
    ] {
        let line = err
            .lines()
            .find(|l| l.contains(&pass))
            .unwrap_or_else(|| panic!("no line for {pass} in {err}"));
        assert!(line.ends_with("done before the interruption"), "{line}");
    }
    // The first status line already counts them: past the two column
    // passes' share of the bytes, not at zero.
    let first = err
        .lines()
        .find_map(overall_percent)
        .unwrap_or_else(|| panic!("no status line in {err}"));
    assert!(
        first > 10.0,
        "overall {first}% right after the resume: {err}"
    );
    // Every pass after them runs, and ends done.
    for i in 3..=n {
        let needle = format!("done pass {i}/{n} ");
        assert!(err.contains(&needle), "{needle} in {err}");
    }
}

#[test]
fn check_reports_each_file_it_reads() {
    let t = tempfile::tempdir().unwrap();
    operands(t.path());
    let o = Command::new(BIN)
        .args(["mul", "a.txt", "b.txt", "-o", "c.txt", "--quiet"])
        .current_dir(t.path())
        .output()
        .unwrap();
    assert!(o.status.success(), "{o:?}");
    let o = Command::new(BIN)
        .args(["check", "a.txt", "b.txt", "c.txt"])
        .current_dir(t.path())
        .env("VASTMUL_PROGRESS_EVERY", "0.01")
        .output()
        .unwrap();
    assert!(o.status.success(), "{o:?}");
    let err = String::from_utf8_lossy(&o.stderr);
    for f in ["a.txt", "b.txt", "c.txt"] {
        let needle = format!("vastmul: done residues of {f}: ");
        assert!(err.contains(&needle), "{needle} in {err}");
    }
    // The verdict stays on stdout, the progress on stderr.
    assert!(String::from_utf8_lossy(&o.stdout).contains("check passed"));
    assert!(!err.contains("check passed"), "{err}");
}

/// Starts `MUL` in `d` with the variables `env` and stops it by SIGINT
/// once the rows of the first prime are under way (journal step 2); checks
/// exit code 130. False when the run finished first (nothing to resume).
fn interrupt_under(d: &Path, env: &[(&str, &str)]) -> bool {
    let mut child = Command::new(BIN)
        .args(MUL)
        .current_dir(d)
        .envs(env.iter().copied())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    let started = std::time::Instant::now();
    while journal_step(d).is_none_or(|s| s < 2) {
        if child.try_wait().unwrap().is_some() {
            return false;
        }
        assert!(
            started.elapsed().as_secs() < 120,
            "no progress in the journal"
        );
        std::thread::sleep(std::time::Duration::from_millis(2));
    }
    // SAFETY: kill only sends a signal to our own child's pid.
    unsafe {
        libc::kill(child.id() as i32, libc::SIGINT);
    }
    let o = child.wait_with_output().unwrap();
    if o.status.success() {
        return false;
    }
    assert_eq!(o.status.code(), Some(130), "{o:?}");
    true
}

/// A run interrupted on the portable four-prime kernels resumes on the
/// vector kernels of the same primes and ends with the product of an
/// uninterrupted run; resuming it on the three-prime set instead is
/// refused (another plan), naming VASTMUL_KERNEL.
#[test]
fn an_interrupted_run_resumes_on_another_kernel_of_the_same_primes() {
    use vastmul::primeset::PrimeSet;
    let Some(vector) = PrimeSet::detect().kernel().map(|k| k.name()) else {
        println!("skipped: this CPU has no vector kernel to resume on");
        return;
    };
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    operands(d);
    let o = Command::new(BIN)
        .args(["mul", "a.txt", "b.txt", "-o", "ref.txt", "-q"])
        .current_dir(d)
        .output()
        .unwrap();
    assert!(o.status.success(), "{o:?}");
    if !interrupt_under(d, &[("VASTMUL_KERNEL", "scalar")]) {
        println!("skipped: the run finished before it could be interrupted");
        return;
    }
    let o = Command::new(BIN)
        .args(MUL)
        .current_dir(d)
        .env("VASTMUL_KERNEL", "wide")
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(2), "{err}");
    assert!(err.contains("VASTMUL_KERNEL"), "{err}");
    let o = Command::new(BIN)
        .args(MUL)
        .current_dir(d)
        .env("VASTMUL_KERNEL", vector)
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(o.status.success(), "{err}");
    assert!(err.contains("resuming from"), "{err}");
    assert_eq!(
        std::fs::read(d.join("c.txt")).unwrap(),
        std::fs::read(d.join("ref.txt")).unwrap(),
        "the resumed product differs from the uninterrupted one"
    );
}
