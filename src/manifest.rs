//! The manifest beside every product: a small JSON file `NAME.vastmul.json`
//! next to `NAME` with its length, format, radix, sign, BLAKE3 and residues
//! modulo the fixed primes, so that anyone can later check the file for
//! bit rot (`vastmul check --file NAME`) and `vastmul check A B NAME` can
//! cross-check the product against what was written.

use crate::format::{Format, Operand, Released, Written};
use crate::residue::{residues, signed, FIXED_MODULI};
use crate::{Error, Radix, Result};
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};

/// What the manifest records.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Manifest {
    /// Always `vastmul product manifest`.
    pub kind: String,
    /// Layout version of this file.
    pub version: u32,
    /// The product's file name (beside the manifest).
    pub file: String,
    /// Its size in bytes.
    pub bytes: u64,
    /// Its format.
    pub format: Format,
    /// Its radix.
    pub radix: Radix,
    /// Below zero.
    pub negative: bool,
    /// Significant limbs.
    pub limbs: u64,
    /// Significant digits in its radix.
    pub digits: u64,
    /// BLAKE3 of the whole file, hexadecimal.
    pub blake3: String,
    /// Signed residues modulo the fixed primes, as `[modulus, residue]`.
    pub residues: Vec<[u64; 2]>,
}

const KIND: &str = "vastmul product manifest";
const VERSION: u32 = 1;

/// Where the manifest of `product` lives.
pub fn path_for(product: &Path) -> PathBuf {
    let mut name = product.file_name().unwrap_or_default().to_os_string();
    name.push(".vastmul.json");
    product.with_file_name(name)
}

/// What a manifest holds, once its parts are known; `residues` are those
/// of the magnitude modulo [`FIXED_MODULI`].
#[allow(clippy::too_many_arguments)]
fn assemble(
    path: &Path,
    bytes: u64,
    format: Format,
    radix: Radix,
    negative: bool,
    (limbs, digits): (u64, u64),
    blake3: blake3::Hash,
    residues: &[u64],
) -> Manifest {
    Manifest {
        kind: KIND.into(),
        version: VERSION,
        file: path
            .file_name()
            .unwrap_or_default()
            .to_string_lossy()
            .into_owned(),
        bytes,
        format,
        radix,
        negative,
        limbs,
        digits,
        blake3: blake3.to_hex().to_string(),
        residues: FIXED_MODULI
            .iter()
            .zip(residues)
            .map(|(&p, &x)| [p, signed(x, negative, p)])
            .collect(),
    }
}

/// Describes the file at `path` as its manifest would.
pub fn describe(path: &Path, format: Option<Format>) -> Result<Manifest> {
    let op = Operand::open(path, format)?;
    let r = residues(&Released(&op), op.limb_count(), op.radix(), &FIXED_MODULI);
    Ok(assemble(
        path,
        op.file_len(),
        op.format(),
        op.radix(),
        op.is_negative(),
        (op.limb_count() as u64, op.digit_count()),
        op.content_hash(),
        &r,
    ))
}

/// The manifest of a product just written: `len` significant limbs with
/// `top` the highest, `written` what the writer reports of the bytes it
/// wrote, `residues` those of the magnitude modulo [`FIXED_MODULI`] (taken
/// from the limbs as they were written, so the file is not parsed again).
pub fn describe_written(
    path: &Path,
    format: Format,
    radix: Radix,
    negative: bool,
    (len, top): (usize, u64),
    written: Written,
    residues: &[u64],
) -> Manifest {
    let digits = match (len, radix) {
        (0, _) => 1,
        (_, Radix::Decimal) => 19 * (len as u64 - 1) + top.to_string().len() as u64,
        (_, Radix::Binary) => 16 * (len as u64 - 1) + format!("{top:x}").len() as u64,
    };
    assemble(
        path,
        written.bytes,
        format,
        radix,
        negative && len > 0,
        (len as u64, digits),
        written.blake3,
        residues,
    )
}

/// Writes the manifest `m` of the product at `path`, atomically
/// (temporary file, fsync, rename), replacing an older one.
pub fn write_for(path: &Path, m: Manifest) -> Result<Manifest> {
    let target = path_for(path);
    let mut tmp_name = std::ffi::OsString::from(".");
    tmp_name.push(target.file_name().unwrap_or_default());
    tmp_name.push(format!(".partial-{}", std::process::id()));
    let tmp = target.with_file_name(tmp_name);
    let bytes = serde_json::to_vec_pretty(&m).expect("manifests serialize");
    let write = || -> std::io::Result<()> {
        use std::io::Write;
        let mut f = std::fs::File::create(&tmp)?;
        f.write_all(&bytes)?;
        f.write_all(b"\n")?;
        f.sync_all()?;
        std::fs::rename(&tmp, &target)
    };
    write().map_err(|e| {
        let _ = std::fs::remove_file(&tmp);
        Error::io(&target, e)
    })?;
    Ok(m)
}

/// The manifest beside `product`, if there is a readable one.
pub fn read_for(product: &Path) -> Result<Option<Manifest>> {
    let path = path_for(product);
    match std::fs::read(&path) {
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(None),
        Err(e) => Err(Error::io(&path, e)),
        Ok(bytes) => match serde_json::from_slice::<Manifest>(&bytes) {
            Ok(m) if m.kind == KIND && m.version == VERSION => Ok(Some(m)),
            Ok(m) => Err(Error::input(
                &path,
                None,
                format!(
                    "not a product manifest of version {VERSION} (kind {:?}, version {})",
                    m.kind, m.version
                ),
                "remove it, or write the product again with vastmul mul",
            )),
            Err(e) => Err(Error::input(
                &path,
                None,
                format!("unreadable manifest: {e}"),
                "remove it, or write the product again with vastmul mul",
            )),
        },
    }
}

/// The differences between a file's manifest and the file as it is now
/// (empty when they agree).
pub fn differences(recorded: &Manifest, now: &Manifest) -> Vec<String> {
    let mut out = Vec::new();
    if recorded.bytes != now.bytes {
        out.push(format!(
            "size {} bytes, recorded {}",
            now.bytes, recorded.bytes
        ));
    }
    if recorded.blake3 != now.blake3 {
        out.push(format!(
            "BLAKE3 {}..., recorded {}...",
            &now.blake3[..16],
            &recorded.blake3[..16.min(recorded.blake3.len())]
        ));
    }
    if recorded.negative != now.negative {
        out.push("sign differs".into());
    }
    for (r, n) in recorded.residues.iter().zip(&now.residues) {
        if r != n {
            out.push(format!(
                "residue modulo {} is {:#x}, recorded {:#x}",
                n[0], n[1], r[1]
            ));
        }
    }
    out
}

/// `vastmul check --file`: the file against its own manifest.
pub fn check_file(path: &Path, format: Option<Format>) -> Result<Manifest> {
    let recorded = read_for(path)?.ok_or_else(|| {
        Error::input(
            path,
            None,
            format!(
                "no manifest beside it (looked for {})",
                path_for(path).display()
            ),
            "check it against its factors instead: vastmul check A B C",
        )
    })?;
    let now = describe(path, format)?;
    let diff = differences(&recorded, &now);
    if diff.is_empty() {
        Ok(now)
    } else {
        Err(Error::verify(
            format!(
                "{} does not match its manifest {}: {}",
                path.display(),
                path_for(path).display(),
                diff.join("; ")
            ),
            format!(
                "the file changed since it was written: restore it from a copy, or recompute \
                 it with vastmul mul; vastmul check A B {} tells whether the file or the \
                 manifest is wrong",
                path.display()
            ),
        ))
    }
}
