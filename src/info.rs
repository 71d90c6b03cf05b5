//! A summary of one operand file, for people and for scripts.

use std::path::{Path, PathBuf};

use serde::{Serialize, Serializer};

use crate::format::{Format, Operand};
use crate::{Radix, Result};

/// What an operand file holds, after full validation.
#[derive(Debug, Clone, Serialize)]
pub struct Info {
    /// The file examined.
    #[serde(serialize_with = "path_as_text")]
    pub path: PathBuf,
    /// Its format, as named or detected.
    pub format: Format,
    /// The radix of its limbs.
    pub radix: Radix,
    /// Whether the number is below zero.
    pub negative: bool,
    /// Significant digits: decimal for base 10^19, hexadecimal for 2^64.
    pub digits: u64,
    /// Significant limbs.
    pub limbs: usize,
    /// The file's size in bytes.
    pub file_bytes: u64,
    /// BLAKE3 hash of the whole file, in lowercase hexadecimal.
    pub blake3: String,
    /// The manifest beside the file, when there is one.
    pub manifest: Option<crate::manifest::Manifest>,
    /// Whether the file's size, BLAKE3 and sign match its manifest.
    pub manifest_matches: Option<bool>,
}

/// Paths need not be UTF-8; a report shows them the way `Display` would
/// rather than failing.
fn path_as_text<S: Serializer>(path: &Path, s: S) -> std::result::Result<S::Ok, S::Error> {
    s.serialize_str(&path.to_string_lossy())
}

/// Opens and validates `path` (detecting the format when `format` is
/// `None`) and summarises it.
pub fn info(path: &Path, format: Option<Format>) -> Result<Info> {
    let op = Operand::open(path, format)?;
    let blake3 = blake3::Hasher::new()
        .update_rayon(op.bytes())
        .finalize()
        .to_hex()
        .to_string();
    let manifest = crate::manifest::read_for(path)?;
    let manifest_matches = manifest
        .as_ref()
        .map(|m| m.blake3 == blake3 && m.bytes == op.file_len() && m.negative == op.is_negative());
    Ok(Info {
        manifest,
        manifest_matches,
        path: path.to_path_buf(),
        format: op.format(),
        radix: op.radix(),
        negative: op.is_negative(),
        digits: op.digit_count(),
        limbs: op.limb_count(),
        file_bytes: op.file_len(),
        blake3,
    })
}

impl std::fmt::Display for Info {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let digit_kind = match self.radix {
            Radix::Binary => "hexadecimal",
            Radix::Decimal => "decimal",
        };
        writeln!(f, "path     {}", self.path.display())?;
        writeln!(f, "format   {}", self.format.name())?;
        writeln!(f, "radix    {}", self.radix.name())?;
        writeln!(
            f,
            "sign     {}",
            if self.negative {
                "negative"
            } else {
                "non-negative"
            }
        )?;
        writeln!(f, "digits   {} {digit_kind}", self.digits)?;
        writeln!(f, "limbs    {}", self.limbs)?;
        writeln!(f, "size     {}", crate::size::show_size(self.file_bytes))?;
        write!(f, "blake3   {}", self.blake3)?;
        match (&self.manifest, self.manifest_matches) {
            (Some(m), Some(ok)) => write!(
                f,
                "\nmanifest {}: {} (residues modulo {} primes recorded; vastmul check --file checks them)",
                crate::manifest::path_for(&self.path).display(),
                if ok { "size, BLAKE3 and sign match" } else { "DOES NOT MATCH the file" },
                m.residues.len()
            ),
            _ => write!(f, "\nmanifest none"),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn summarises_a_decimal_file() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("n.txt");
        let text = b"-000123456789012345678901\n";
        std::fs::write(&p, text).unwrap();
        let i = info(&p, None).unwrap();
        assert_eq!(i.format, Format::Decimal);
        assert_eq!(i.radix, Radix::Decimal);
        assert!(i.negative);
        assert_eq!(i.digits, 21);
        assert_eq!(i.limbs, 2);
        assert_eq!(i.file_bytes, text.len() as u64);
        assert_eq!(i.blake3, blake3::hash(text).to_hex().to_string());

        let shown = i.to_string();
        assert!(shown.contains("n.txt"), "{shown}");
        assert!(shown.contains("negative"), "{shown}");
        assert!(shown.contains("21 decimal"), "{shown}");
        assert!(shown.contains(&i.blake3), "{shown}");
        // The values start in one column.
        let columns: Vec<usize> = shown
            .lines()
            .map(|l| {
                let key_end = l.find(' ').unwrap();
                key_end + (l[key_end..].len() - l[key_end..].trim_start().len())
            })
            .collect();
        assert!(columns.iter().all(|&c| c == columns[0]), "{shown}");

        let json: serde_json::Value = serde_json::to_value(&i).unwrap();
        assert_eq!(json["format"], "decimal");
        assert_eq!(json["radix"], "decimal");
        assert_eq!(json["digits"], 21);
        assert_eq!(json["limbs"], 2);
        assert_eq!(json["negative"], true);
        assert_eq!(json["path"], p.to_string_lossy().as_ref());
    }

    #[test]
    fn errors_pass_through() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("bad.txt");
        std::fs::write(&p, b"12x").unwrap();
        let err = info(&p, None).unwrap_err().to_string();
        assert!(err.contains("bad.txt") && err.contains("offset 2"), "{err}");
    }
}
