//! The progress display on stderr: two bars on a terminal (the pass under
//! way, the whole run), timestamped lines at a steady rate elsewhere, or
//! nothing with `--quiet`. A thread polls [`crate::progress::METER`];
//! the passes never wait for the display.

use crate::progress::{Event, PassDone, PassView, Snapshot, METER};
use indicatif::{MultiProgress, ProgressBar, ProgressDrawTarget, ProgressStyle};
use std::io::IsTerminal;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::thread::JoinHandle;
use std::time::{Duration, Instant, SystemTime};

/// The environment variable that sets the seconds between plain log lines.
pub const EVERY_VAR: &str = "VASTMUL_PROGRESS_EVERY";

/// Seconds between plain log lines by default: often enough to see that a
/// long run lives, rarely enough that a log of a day's run stays readable.
pub const DEFAULT_EVERY: f64 = 10.0;

/// How progress is shown.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Style {
    /// Bars redrawn in place (stderr is a terminal).
    Bars,
    /// A timestamped line every so often, and one per completed pass.
    Lines {
        /// Time between lines.
        every: Duration,
    },
    /// Nothing but errors.
    Quiet,
}

impl Style {
    /// Bars when stderr is a terminal, lines otherwise, nothing when
    /// `quiet`. The line interval comes from [`EVERY_VAR`] when set.
    pub fn for_stderr(quiet: bool) -> Style {
        if quiet {
            Style::Quiet
        } else if std::io::stderr().is_terminal() {
            Style::Bars
        } else {
            let every = std::env::var(EVERY_VAR)
                .ok()
                .and_then(|v| v.parse::<f64>().ok())
                .filter(|s| s.is_finite() && *s > 0.0)
                .unwrap_or(DEFAULT_EVERY);
            Style::Lines {
                every: Duration::from_secs_f64(every),
            }
        }
    }
}

/// A running display; [`Display::finish`] stops it and clears the bars.
pub struct Display {
    stop: Arc<AtomicBool>,
    thread: Option<JoinHandle<()>>,
}

impl Display {
    /// Starts showing the meter's progress in `style`.
    pub fn start(style: Style) -> Display {
        METER.attach(style != Style::Quiet);
        METER.silence(style == Style::Quiet);
        let stop = Arc::new(AtomicBool::new(false));
        let thread = match style {
            Style::Quiet => None,
            Style::Bars => {
                let stop = stop.clone();
                Some(std::thread::spawn(move || bars(&stop)))
            }
            Style::Lines { every } => {
                let stop = stop.clone();
                Some(std::thread::spawn(move || lines(&stop, every)))
            }
        };
        Display { stop, thread }
    }

    /// Stops the display: the bars are cleared, pending lines printed.
    pub fn finish(mut self) {
        self.stop_now();
    }

    fn stop_now(&mut self) {
        self.stop.store(true, Ordering::Relaxed);
        if let Some(t) = self.thread.take() {
            // Wakes the thread from its wait at once: a short run must not
            // pay for the rest of a tick on its way out.
            t.thread().unpark();
            let _ = t.join();
        }
        METER.attach(false);
        METER.silence(false);
    }
}

impl Drop for Display {
    fn drop(&mut self) {
        self.stop_now();
    }
}

const TICK: Duration = Duration::from_millis(100);

fn bars(stop: &AtomicBool) {
    let multi = MultiProgress::with_draw_target(ProgressDrawTarget::stderr());
    let style = ProgressStyle::with_template("{prefix:>10} [{bar:30}] {percent:>3}% {wide_msg}")
        .expect("a valid template")
        .progress_chars("=> ");
    let pass = multi.add(ProgressBar::new(1000).with_style(style.clone()));
    // The whole-run bar appears once a plan gives the run a size.
    let mut overall: Option<ProgressBar> = None;
    let mut shown = false;
    loop {
        let stopping = stop.load(Ordering::Relaxed);
        for e in METER.take_events() {
            let _ = multi.println(match e {
                Event::Note(n) => format!("vastmul: {n}"),
                Event::PassDone(d) => format!("     done {}", done_text(&d)),
            });
        }
        if stopping {
            break;
        }
        let s = METER.snapshot();
        if let Some(p) = &s.pass {
            shown = true;
            pass.set_prefix(position(p));
            pass.set_position((p.fraction.unwrap_or(0.0) * 1000.0) as u64);
            pass.set_message(pass_text(p));
            if let Some(o) = &s.overall {
                let bar = overall.get_or_insert_with(|| {
                    let bar = multi.add(ProgressBar::new(1000).with_style(style.clone()));
                    bar.set_prefix("overall");
                    bar
                });
                bar.set_position((o.fraction * 1000.0) as u64);
                bar.set_message(format!(
                    "elapsed {}, ETA {}",
                    human(o.elapsed),
                    o.eta.map_or("?".into(), human)
                ));
            }
        } else if shown {
            pass.set_message("");
        }
        // Woken early by `stop_now`.
        std::thread::park_timeout(TICK);
    }
    pass.finish_and_clear();
    if let Some(bar) = overall {
        bar.finish_and_clear();
    }
    let _ = multi.clear();
}

fn lines(stop: &AtomicBool, every: Duration) {
    let mut last = Instant::now();
    loop {
        let stopping = stop.load(Ordering::Relaxed);
        for e in METER.take_events() {
            match e {
                Event::Note(n) => eprintln!("{} vastmul: {n}", utc_now()),
                Event::PassDone(d) => {
                    eprintln!("{} vastmul: done {}", utc_now(), done_text(&d))
                }
            }
        }
        if stopping {
            return;
        }
        if last.elapsed() >= every {
            last = Instant::now();
            if let Some(line) = status_line(&METER.snapshot()) {
                eprintln!("{} vastmul: {line}", utc_now());
            }
        }
        // Woken early by `stop_now`.
        std::thread::park_timeout(TICK.min(every));
    }
}

/// "pass 3/12", or nothing outside a plan (the message names the step).
fn position(p: &PassView) -> String {
    match p.index {
        Some(i) => format!("pass {i}/{}", p.count),
        None => String::new(),
    }
}

fn pass_text(p: &PassView) -> String {
    let mut s = p.name.clone();
    if let Some(r) = p.bytes_per_second {
        s += &format!(", {}/s", bytes(r));
    }
    if let Some(e) = p.eta {
        s += &format!(", ETA {}", human(e));
    }
    s
}

fn done_text(d: &PassDone) -> String {
    let at = match d.index {
        Some(i) => format!("pass {i}/{} ", d.count),
        None => String::new(),
    };
    if d.done_before {
        return format!("{at}{}: done before the interruption", d.name);
    }
    let rate = d
        .bytes_per_second
        .map_or(String::new(), |r| format!(", {}/s", bytes(r)));
    format!("{at}{}: {:.2} s{rate}", d.name, d.seconds)
}

/// One plain log line for a snapshot (`None` when nothing runs).
pub fn status_line(s: &Snapshot) -> Option<String> {
    let p = s.pass.as_ref()?;
    let mut line = match p.index {
        Some(i) => format!("pass {i}/{} ({})", p.count, p.name),
        None => p.name.clone(),
    };
    if let Some(f) = p.fraction {
        line += &format!(": {:.1}%", 100.0 * f);
    } else {
        line += &format!(": running for {}", human(p.elapsed));
    }
    if let Some(r) = p.bytes_per_second {
        line += &format!(", {}/s", bytes(r));
    }
    if let Some(e) = p.eta {
        line += &format!(", pass ETA {}", human(e));
    }
    if let Some(o) = &s.overall {
        line += &format!("; overall {:.1}%", 100.0 * o.fraction);
        if let Some(e) = o.eta {
            line += &format!(", ETA {}", human(e));
        }
    }
    Some(line)
}

/// `1.20 GB`, `350.0 MB`, `12 B` (decimal units, as disks are sold).
fn bytes(b: f64) -> String {
    const UNITS: [&str; 5] = ["kB", "MB", "GB", "TB", "PB"];
    if b < 1000.0 {
        return format!("{b:.0} B");
    }
    let mut v = b / 1000.0;
    let mut i = 0;
    while v >= 1000.0 && i + 1 < UNITS.len() {
        v /= 1000.0;
        i += 1;
    }
    format!("{v:.2} {}", UNITS[i])
}

/// `4 s`, `3 min 20 s`, `2 h 05 min`.
pub fn human(d: Duration) -> String {
    let s = d.as_secs();
    match s {
        0..=59 => format!("{s} s"),
        60..=3599 => format!("{} min {:02} s", s / 60, s % 60),
        _ => format!("{} h {:02} min", s / 3600, (s % 3600) / 60),
    }
}

/// The time now in UTC, as `2026-12-02T04:50:01Z`.
pub fn utc_now() -> String {
    let secs = SystemTime::now()
        .duration_since(SystemTime::UNIX_EPOCH)
        .map_or(0, |d| d.as_secs());
    utc_text(secs)
}

/// Seconds since 1970 as an ISO 8601 UTC time.
fn utc_text(secs: u64) -> String {
    let (days, rest) = (secs / 86_400, secs % 86_400);
    // Days to a civil date in the proleptic Gregorian calendar, by 400-year
    // eras of 146097 days (a standard algorithm, common practice).
    let z = days as i64 + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let day = doy - (153 * mp + 2) / 5 + 1;
    let month = if mp < 10 { mp + 3 } else { mp - 9 };
    let year = yoe + era * 400 + i64::from(month <= 2);
    format!(
        "{year:04}-{month:02}-{day:02}T{:02}:{:02}:{:02}Z",
        rest / 3600,
        (rest % 3600) / 60,
        rest % 60
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn utc_text_matches_known_instants() {
        // The Unix epoch, the leap day of 2000, and 2^31 seconds (the 32-bit
        // time_t limit, 2038-01-19T03:14:08Z: common knowledge of the trade).
        assert_eq!(utc_text(0), "1970-01-01T00:00:00Z");
        assert_eq!(utc_text(951_782_400), "2000-02-29T00:00:00Z");
        assert_eq!(utc_text(1 << 31), "2038-01-19T03:14:08Z");
    }

    #[test]
    fn durations_and_sizes_read_naturally() {
        assert_eq!(human(Duration::from_secs(4)), "4 s");
        assert_eq!(human(Duration::from_secs(200)), "3 min 20 s");
        assert_eq!(human(Duration::from_secs(7500)), "2 h 05 min");
        assert_eq!(bytes(12.0), "12 B");
        assert_eq!(bytes(1.2e9), "1.20 GB");
    }

    #[test]
    fn a_status_line_names_the_pass_and_both_etas() {
        let s = Snapshot {
            pass: Some(PassView {
                index: Some(3),
                count: 12,
                name: "rows and pointwise product, prime 0".into(),
                fraction: Some(0.452),
                bytes_per_second: Some(1.2e9),
                eta: Some(Duration::from_secs(12)),
                elapsed: Duration::from_secs(10),
            }),
            overall: Some(crate::progress::OverallView {
                fraction: 0.301,
                eta: Some(Duration::from_secs(80)),
                elapsed: Duration::from_secs(30),
            }),
        };
        assert_eq!(
            status_line(&s).unwrap(),
            "pass 3/12 (rows and pointwise product, prime 0): 45.2%, 1.20 GB/s, \
             pass ETA 12 s; overall 30.1%, ETA 1 min 20 s"
        );
        assert_eq!(status_line(&Snapshot::default()), None);
    }
}
