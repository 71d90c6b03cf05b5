//! The release binary killed with SIGKILL at instants spread over every pass
//! of an out-of-core product of about 10^6 limbs, rerun after each kill:
//! the final product must be byte for byte that of an uninterrupted run.
//! A SIGINT variant checks exit code 130, the resume hint and a clean
//! resume.

use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

/// The release binary, built on first use (the kill instants are chosen
/// from release-build timings).
fn release_binary() -> PathBuf {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    // Its own target directory: the cargo running this test may hold the
    // lock on the default one.
    let target = root.join("target").join("kill-test");
    let cargo = std::env::var("CARGO").unwrap_or_else(|_| "cargo".into());
    let status = Command::new(cargo)
        .args(["build", "--release", "--quiet", "--bin", "vastmul"])
        .env("CARGO_TARGET_DIR", &target)
        .current_dir(root)
        .status()
        .expect("cargo build --release");
    assert!(status.success(), "building the release binary failed");
    target.join("release").join("vastmul")
}

const BUDGET: &str = "24MiB";

fn mul_args(out: &str) -> Vec<String> {
    [
        "mul", "a.txt", "b.txt", "-o", out, "--memory", BUDGET, "--json",
    ]
    .iter()
    .map(|s| s.to_string())
    .collect()
}

fn blake3_of(path: &Path) -> String {
    blake3::hash(&std::fs::read(path).unwrap())
        .to_hex()
        .to_string()
}

/// Operands of 19 * 10^6 digits (10^6 limbs) each, and the product of an
/// uninterrupted in-memory run.
fn setup(bin: &Path, dir: &Path) -> String {
    for (seed, name) in [("21", "a.txt"), ("22", "b.txt")] {
        let o = Command::new(bin)
            .args(["gen", "--digits", "19000000", "--seed", seed, "-o", name])
            .current_dir(dir)
            .output()
            .unwrap();
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    }
    let o = Command::new(bin)
        .args(["mul", "a.txt", "b.txt", "-o", "ram.txt"])
        .current_dir(dir)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    blake3_of(&dir.join("ram.txt"))
}

/// The timeline of an uninterrupted out-of-core run: when each pass began
/// and how long it took, in seconds from the process start.
fn timeline(bin: &Path, dir: &Path) -> (Vec<(String, f64, f64)>, f64) {
    let start = Instant::now();
    let o = Command::new(bin)
        .args(mul_args("timed.txt"))
        .current_dir(dir)
        .output()
        .unwrap();
    let total = start.elapsed().as_secs_f64();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let r: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert_eq!(r["plan"]["algorithm"]["kind"], "out_of_core", "{r}");
    let mut t = r["open_seconds"].as_f64().unwrap() + r["identify_seconds"].as_f64().unwrap();
    let mut passes = Vec::new();
    for p in r["passes"].as_array().unwrap() {
        let s = p["seconds"].as_f64().unwrap();
        passes.push((p["name"].as_str().unwrap().to_string(), t, s));
        t += s;
    }
    std::fs::remove_file(dir.join("timed.txt")).unwrap();
    (passes, total)
}

/// Where a run starts its passes, from its first line on stderr: the pass
/// index (0-based) and the fraction of its blocks already done.
fn parse_position(line: &str) -> (usize, f64) {
    // "... resuming from DIR: pass 5 of 12 (name): 8 of 32 blocks done (...)"
    let Some(at) = line.find(": pass ") else {
        return (0, 0.0);
    };
    let rest = &line[at + 7..];
    let index: usize = rest.split(' ').next().unwrap().parse().unwrap();
    let fraction = rest
        .split("): ")
        .nth(1)
        .and_then(|t| {
            let mut w = t.split(' ');
            let done: f64 = w.next()?.parse().ok()?;
            w.next();
            let total: f64 = w.next()?.parse().ok()?;
            Some(done / total)
        })
        .unwrap_or(0.0);
    (index - 1, fraction)
}

/// Starts `mul`; once it says where it starts its passes, lets it run for
/// `delay(pass, fraction)` and sends `signal`. Returns the exit status, the
/// stderr and the position the run started from.
fn run_and_signal(
    bin: &Path,
    dir: &Path,
    delay: Option<&dyn Fn(usize, f64) -> f64>,
    signal: i32,
) -> (std::process::ExitStatus, String, (usize, f64)) {
    use std::io::BufRead;
    let mut child = Command::new(bin)
        .args(mul_args("c.txt"))
        .current_dir(dir)
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let stderr = child.stderr.take().unwrap();
    let (tx, rx) = std::sync::mpsc::channel();
    let reader = std::thread::spawn(move || {
        let mut all = String::new();
        for line in std::io::BufReader::new(stderr)
            .lines()
            .map_while(Result::ok)
        {
            let _ = tx.send(line.clone());
            all.push_str(&line);
            all.push('\n');
        }
        all
    });
    let mut position = (0, 0.0);
    if let Some(delay) = delay {
        // The first line comes once the state is checked, as the passes begin.
        if let Ok(line) = rx.recv_timeout(Duration::from_secs(30)) {
            if line.contains("resuming from") {
                position = parse_position(&line);
            }
            std::thread::sleep(Duration::from_secs_f64(delay(position.0, position.1)));
            // SAFETY: kill only sends a signal to our own child's pid.
            unsafe {
                libc::kill(child.id() as i32, signal);
            }
        }
    }
    let status = child.wait().unwrap();
    (status, reader.join().unwrap(), position)
}

/// What a killed run must have reached before the kill.
#[derive(Clone, Copy, Debug)]
enum Mark {
    /// The state directory exists (the manifest is being or was written).
    State,
    /// The journal's last record is of this step or a later one (steps are
    /// numbered as the passes of a non-square plan, from 0).
    Step(u16),
    /// The product is being written.
    Output,
}

/// True once the run in `dir` has reached `mark`.
fn reached(dir: &Path, mark: Mark) -> bool {
    let entries: Vec<_> = std::fs::read_dir(dir).unwrap().flatten().collect();
    let state = entries.iter().find(|e| {
        e.file_name()
            .to_string_lossy()
            .starts_with(".vastmul-state-")
    });
    match mark {
        Mark::State => state.is_some(),
        Mark::Step(step) => state.is_some_and(|s| {
            let bytes = std::fs::read(s.path().join("journal")).unwrap_or_default();
            // Records are 80 bytes; the step is the u16 after the magic.
            let whole = bytes.len() / 80 * 80;
            whole > 0 && u16::from_le_bytes([bytes[whole - 76], bytes[whole - 75]]) >= step
        }),
        Mark::Output => entries.iter().any(|e| {
            e.file_name()
                .to_string_lossy()
                .starts_with(".c.txt.vastmul-partial-")
                && e.metadata().is_ok_and(|m| m.len() > 0)
        }),
    }
}

#[test]
fn killed_at_every_pass_and_resumed_gives_the_same_product() {
    use std::os::unix::process::ExitStatusExt;
    let bin = release_binary();
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    let reference = setup(&bin, d);
    let mut rng = 0x2545_f491_4f6c_dd1du64;
    let mut uniform = move || {
        rng ^= rng << 13;
        rng ^= rng >> 7;
        rng ^= rng << 17;
        (rng >> 11) as f64 / (1u64 << 53) as f64
    };
    // One kill at the start (state being written), one in each pass of the
    // plan (once the journal shows it began, after a random extra wait),
    // and one while the product is written. Every block ends with a
    // journal write, so kills also land on state writes throughout.
    let mut marks = vec![Mark::State];
    marks.extend((0..=10).map(Mark::Step));
    marks.push(Mark::Output);
    let mut kills = Vec::new();
    let mut started_at = Vec::new();
    for mark in marks {
        let mut child = Command::new(&bin)
            .args(mul_args("c.txt"))
            .current_dir(d)
            .stdout(Stdio::null())
            .stderr(Stdio::piped())
            .spawn()
            .unwrap();
        let stderr = child.stderr.take().unwrap();
        let reader = std::thread::spawn(move || {
            let mut s = String::new();
            std::io::Read::read_to_string(&mut { stderr }, &mut s).ok();
            s
        });
        let extra = Duration::from_secs_f64(0.03 * uniform());
        let status = loop {
            if let Some(status) = child.try_wait().unwrap() {
                break status;
            }
            if reached(d, mark) {
                std::thread::sleep(extra);
                child.kill().unwrap(); // SIGKILL
                break child.wait().unwrap();
            }
            std::thread::sleep(Duration::from_millis(1));
        };
        let err = reader.join().unwrap();
        if let Some(line) = err.lines().find(|l| l.contains("resuming from")) {
            started_at.push(parse_position(line));
        }
        if status.signal() == Some(libc::SIGKILL) {
            kills.push(mark);
            assert!(!d.join("c.txt").exists(), "a killed run left a product");
        } else {
            assert!(status.success(), "{err}");
            break;
        }
    }
    if !d.join("c.txt").exists() {
        let (status, err, from) = run_and_signal(&bin, d, None, 0);
        assert!(status.success(), "final rerun: {err}");
        started_at.push(from);
    }
    assert_eq!(
        blake3_of(&d.join("c.txt")),
        reference,
        "resumed product differs"
    );
    let leftovers: Vec<_> = std::fs::read_dir(d)
        .unwrap()
        .flatten()
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .filter(|n| n.starts_with('.'))
        .collect();
    assert!(leftovers.is_empty(), "left behind: {leftovers:?}");
    eprintln!(
        "{} kills at {kills:?}; reruns resumed at (pass, fraction done) {started_at:?}",
        kills.len()
    );
    // 13 are aimed; on a slow machine a short pass may end before its kill
    // lands, which then lands in the next one.
    assert!(
        kills.len() >= 10,
        "only {} kills landed before the run finished",
        kills.len()
    );
    let resumed_passes: std::collections::BTreeSet<usize> =
        started_at.iter().map(|p| p.0).collect();
    assert!(
        resumed_passes.len() >= 7,
        "reruns resumed in too few passes: {resumed_passes:?}"
    );
}

#[test]
fn sigint_stops_with_130_and_the_rerun_resumes() {
    let bin = release_binary();
    let t = tempfile::tempdir().unwrap();
    let d = t.path();
    let reference = setup(&bin, d);
    let (passes, _) = timeline(&bin, d);
    let first_half: f64 = passes[..passes.len() / 2].iter().map(|p| p.2).sum();
    let delay = move |_: usize, _: f64| first_half;
    let (status, err, _) = run_and_signal(&bin, d, Some(&delay), libc::SIGINT);
    assert_eq!(status.code(), Some(130), "{err}");
    assert!(err.contains("to resume: rerun the same command"), "{err}");
    assert!(!d.join("c.txt").exists());
    let (status, err, from) = run_and_signal(&bin, d, None, 0);
    assert!(status.success(), "{err}");
    assert!(err.contains("resuming from"), "{err}");
    assert!(from.0 > 0 || from.1 > 0.0 || err.contains("pass "), "{err}");
    assert_eq!(blake3_of(&d.join("c.txt")), reference);
}
