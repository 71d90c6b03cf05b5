//! Byte sizes on the command line (`512MiB`, `4GiB`, `1.5G`, `1000000`) and
//! the machine's physical memory.
//!
//! Decimal units are powers of ten (`K`/`KB` = 10^3, `M`/`MB` = 10^6,
//! `G`/`GB` = 10^9, `T`/`TB` = 10^12); binary units are powers of two
//! (`KiB` = 2^10, `MiB` = 2^20, `GiB` = 2^30, `TiB` = 2^40). Units are case
//! insensitive; no space may separate number and unit.

use crate::{Error, Result};

/// Parses a size such as `512MiB`, `4GiB`, `1.5G` or `1000000` (bytes).
pub fn parse_size(text: &str) -> Result<u64> {
    let bad = |why: &str| {
        Error::usage(
            format!("cannot read the size {text:?}: {why}"),
            "write a number and a unit with no space, such as 512MiB, 4GiB, 1.5G or 1000000 (bytes)",
        )
    };
    let split = text
        .find(|c: char| !(c.is_ascii_digit() || c == '.'))
        .unwrap_or(text.len());
    let (number, unit) = text.split_at(split);
    if number.is_empty()
        || number.matches('.').count() > 1
        || number.starts_with('.')
        || number.ends_with('.')
    {
        return Err(bad("it does not start with a number"));
    }
    let scale: u64 = match unit.to_ascii_lowercase().as_str() {
        "" | "b" => 1,
        "k" | "kb" => 1_000,
        "m" | "mb" => 1_000_000,
        "g" | "gb" => 1_000_000_000,
        "t" | "tb" => 1_000_000_000_000,
        "kib" => 1 << 10,
        "mib" => 1 << 20,
        "gib" => 1 << 30,
        "tib" => 1 << 40,
        _ if unit.starts_with(char::is_whitespace) => {
            return Err(bad("a space separates the number from its unit"))
        }
        _ => {
            return Err(bad(&format!(
                "unknown unit {unit:?}; the units are B, K, KB, M, MB, G, GB, T, TB, KiB, MiB, \
                 GiB, TiB"
            )))
        }
    };
    let (int, frac) = number.split_once('.').unwrap_or((number, ""));
    let int: u64 = int.parse().map_err(|_| bad("number too large"))?;
    let mut bytes = int
        .checked_mul(scale)
        .ok_or_else(|| bad("number too large"))?;
    // The fraction of the unit, exactly, rounded down to whole bytes.
    let digits = &frac[..frac.len().min(18)];
    if !digits.is_empty() {
        let f: u128 = digits.parse().map_err(|_| bad("bad fraction"))?;
        bytes += (f * scale as u128 / 10u128.pow(digits.len() as u32)) as u64;
    }
    if bytes == 0 {
        return Err(bad("a size must be positive"));
    }
    Ok(bytes)
}

/// Formats a byte count with a binary unit, for messages.
pub fn show_size(bytes: u64) -> String {
    const UNITS: [&str; 5] = ["B", "KiB", "MiB", "GiB", "TiB"];
    let mut v = bytes as f64;
    let mut u = 0;
    while v >= 1024.0 && u + 1 < UNITS.len() {
        v /= 1024.0;
        u += 1;
    }
    if u == 0 {
        format!("{bytes} B")
    } else {
        format!("{v:.1} {} ({bytes} bytes)", UNITS[u])
    }
}

/// Physical memory in bytes from `/proc/meminfo`, if readable.
pub fn physical_memory() -> Option<u64> {
    let text = std::fs::read_to_string("/proc/meminfo").ok()?;
    let line = text.lines().find(|l| l.starts_with("MemTotal:"))?;
    let kib: u64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kib * 1024)
}

/// The default memory budget: half of physical memory (4 GiB where it
/// cannot be read), leaving the rest to the page cache that out-of-core
/// passes stream through and to other programs.
pub fn default_budget() -> u64 {
    physical_memory().map_or(4 << 30, |m| m / 2)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sizes_in_every_unit() {
        assert_eq!(parse_size("512MiB").unwrap(), 512 << 20);
        assert_eq!(parse_size("4GiB").unwrap(), 4 << 30);
        assert_eq!(parse_size("1.5G").unwrap(), 1_500_000_000);
        assert_eq!(parse_size("1000000").unwrap(), 1_000_000);
        assert_eq!(parse_size("2kb").unwrap(), 2000);
        assert_eq!(parse_size("0.5KiB").unwrap(), 512);
        assert_eq!(parse_size("3B").unwrap(), 3);
    }

    #[test]
    fn bad_sizes_are_refused_with_a_fix() {
        for bad in [
            "4 GB",
            "",
            "GiB",
            "1.2.3G",
            "12XB",
            "0",
            "-5M",
            ".5G",
            "99999999999999999999T",
        ] {
            let e = parse_size(bad).unwrap_err().to_string();
            assert!(e.contains("512MiB"), "{bad}: {e}");
        }
        let e = parse_size("4 GB").unwrap_err().to_string();
        assert!(e.contains("a space separates"), "{e}");
        let e = parse_size("12XB").unwrap_err().to_string();
        assert!(e.contains("unknown unit"), "{e}");
    }

    #[test]
    fn physical_memory_is_plausible_here() {
        if let Some(m) = physical_memory() {
            assert!(m > 64 << 20);
            assert!(default_budget() <= m);
        }
    }
}
