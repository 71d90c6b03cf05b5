//! The vastmul container: a self-describing, checksummed binary operand.
//!
//! Text is portable but large, raw limbs are compact but carry no radix,
//! sign or integrity check. The container is compact and says everything
//! needed to read it back, and its payload is aligned so that a memory map
//! can be read in place.
//!
//! # Layout, version 1
//!
//! All integers are little-endian.
//!
//! | offset | size | field                                                        |
//! |-------:|-----:|--------------------------------------------------------------|
//! |      0 |    8 | magic: the bytes `VASTINT` followed by one zero byte          |
//! |      8 |    2 | version, `u16` = 1                                           |
//! |     10 |    1 | radix code: 0 = base 2^64, 1 = base 10^19                    |
//! |     11 |    1 | sign code: 0 = non-negative, 1 = negative                    |
//! |     12 |    4 | reserved, all zero                                           |
//! |     16 |    8 | limb count `n`, `u64`                                        |
//! |     24 |    8 | payload offset, `u64` = 64                                   |
//! |     32 |   32 | BLAKE3 hash of the payload bytes (offset 64 to end of file)  |
//! |     64 | 8·n  | payload: `n` limbs, `u64` each, least significant first     |
//!
//! Rules a reader enforces:
//!
//! * the file is exactly `64 + 8·n` bytes long;
//! * there are no leading zero limbs: if `n > 0`, limb `n - 1` is non-zero;
//!   zero is `n = 0` with an empty payload;
//! * zero is non-negative (sign code 0);
//! * in base 10^19 every limb is below 10^19;
//! * the stored hash matches the payload.
//!
//! The payload offset is stored rather than implied so that a later version
//! can grow the header; version 1 requires 64, which keeps limbs 64-byte
//! aligned in a page-aligned mapping. A reader rejects any other version.

use std::io::{self, Write};
use std::ops::Range;
use std::path::Path;

use rayon::prelude::*;

use super::limbs::{limbs_to_bytes, word, IO_CHUNK_LIMBS, LIMB_BYTES};
use crate::radix::DEC_BASE;
use crate::{Error, Radix, Result};

/// The first eight bytes of every container.
pub const MAGIC: [u8; 8] = *b"VASTINT\0";

/// The container version this build reads and writes.
pub const VERSION: u16 = 1;

/// Header length, and the payload offset, of a version 1 container.
pub const HEADER_LEN: usize = 64;

/// Whether `bytes` begin with the container magic.
pub(crate) fn has_magic(bytes: &[u8]) -> bool {
    bytes.starts_with(&MAGIC)
}

/// What a validated container holds.
#[derive(Clone, Debug)]
pub(crate) struct ContainerLayout {
    pub radix: Radix,
    pub negative: bool,
    /// Byte range of the payload in the file.
    pub payload: Range<usize>,
}

fn field_u64(bytes: &[u8], at: usize) -> u64 {
    let mut a = [0u8; 8];
    a.copy_from_slice(&bytes[at..at + 8]);
    u64::from_le_bytes(a)
}

const RECREATE: &str = "the file is damaged; recreate it from its source";

/// Validates a whole container: header, length, hash and limb values.
/// Bytes of payload hashed or checked before their pages are released (a
/// multiple of the limb size).
const HASH_WINDOW: usize = 4 << 20;

pub(crate) fn scan(
    path: &Path,
    bytes: &[u8],
    release: super::text::Release<'_>,
) -> Result<ContainerLayout> {
    let err =
        |at: usize, what: String, fix: &str| Err(Error::input(path, Some(at as u64), what, fix));
    if !has_magic(bytes) {
        return err(
            0,
            "not a vastmul container: the file does not start with the container magic".into(),
            "leave the format to be detected, or name the format the file is in",
        );
    }
    if bytes.len() < HEADER_LEN {
        return err(
            bytes.len(),
            format!(
                "container header is truncated: the file has {} bytes, the header needs {HEADER_LEN}",
                bytes.len()
            ),
            RECREATE,
        );
    }
    let version = u16::from_le_bytes([bytes[8], bytes[9]]);
    if version != VERSION {
        return err(
            8,
            format!("container version {version} is not supported; this vastmul reads version {VERSION}"),
            "read the file with the vastmul release that wrote it, or convert it to text there",
        );
    }
    let radix = match bytes[10] {
        0 => Radix::Binary,
        1 => Radix::Decimal,
        code => {
            return err(
                10,
                format!("radix code {code} is unknown (0 means 2^64, 1 means 10^19)"),
                RECREATE,
            )
        }
    };
    let negative = match bytes[11] {
        0 => false,
        1 => true,
        code => {
            return err(
                11,
                format!("sign code {code} is unknown (0 means non-negative, 1 negative)"),
                RECREATE,
            )
        }
    };
    if let Some(i) = bytes[12..16].iter().position(|&b| b != 0) {
        return err(
            12 + i,
            "reserved header bytes are not zero".into(),
            RECREATE,
        );
    }
    let count = field_u64(bytes, 16);
    let payload_offset = field_u64(bytes, 24);
    if payload_offset != HEADER_LEN as u64 {
        return err(
            24,
            format!("payload offset is {payload_offset}; version 1 requires {HEADER_LEN}"),
            RECREATE,
        );
    }
    let have = (bytes.len() - HEADER_LEN) as u64;
    let need = count.checked_mul(LIMB_BYTES as u64);
    match need {
        Some(need) if need == have => {}
        Some(need) if need < have => {
            return err(
                HEADER_LEN + need as usize,
                format!(
                    "{} unexpected bytes after the {count} limbs the header announces",
                    have - need
                ),
                "the file is damaged or was appended to; recreate it",
            )
        }
        _ => {
            return err(
                bytes.len(),
                format!(
                    "file is truncated: the header announces {count} limbs ({} payload bytes) \
                     but only {have} bytes follow the header",
                    count as u128 * LIMB_BYTES as u128
                ),
                "the file is incomplete; recreate it, or copy it again",
            )
        }
    }
    let payload = &bytes[HEADER_LEN..];

    // The hash is checked before the limb values: in a file whose hash
    // matches, a bad value is a writer's bug, and in one whose hash does not,
    // corruption is the honest diagnosis whatever the bytes now say.
    let mut stored = [0u8; 32];
    stored.copy_from_slice(&bytes[32..64]);
    // Hashed in windows whose pages are released as the hash moves on, so
    // that a mapped container larger than the memory budget can be opened.
    let mut hasher = blake3::Hasher::new();
    for (w, window) in payload.chunks(HASH_WINDOW).enumerate() {
        hasher.update_rayon(window);
        release(HEADER_LEN + w * HASH_WINDOW, window.len());
    }
    let actual = hasher.finalize();
    if actual != blake3::Hash::from_bytes(stored) {
        return err(
            32,
            format!(
                "payload hash mismatch: file is corrupt (header says {}, payload hashes to {})",
                blake3::Hash::from_bytes(stored).to_hex(),
                actual.to_hex()
            ),
            RECREATE,
        );
    }

    let n = payload.len() / LIMB_BYTES;
    if n == 0 && negative {
        return err(
            11,
            "negative zero: zero must have sign code 0".into(),
            RECREATE,
        );
    }
    if n > 0 && word(payload, n - 1) == 0 {
        return err(
            HEADER_LEN + (n - 1) * LIMB_BYTES,
            "the most significant limb is zero: the limb count includes leading zero limbs".into(),
            RECREATE,
        );
    }
    if radix == Radix::Decimal {
        // Checked in windows like the hash, releasing pages behind it.
        const TASK: usize = 1 << 14;
        let mut bad = None;
        for (w, window) in payload.chunks(HASH_WINDOW).enumerate() {
            bad = window
                .par_chunks(TASK * LIMB_BYTES)
                .enumerate()
                .find_map_first(|(t, chunk)| {
                    (0..chunk.len() / LIMB_BYTES)
                        .find(|&i| word(chunk, i) >= DEC_BASE)
                        .map(|i| (w * HASH_WINDOW) / LIMB_BYTES + t * TASK + i)
                });
            release(HEADER_LEN + w * HASH_WINDOW, window.len());
            if bad.is_some() {
                break;
            }
        }
        if let Some(i) = bad {
            return err(
                HEADER_LEN + i * LIMB_BYTES,
                format!(
                    "limb {i} is {}, not below 10^19, in a base-10^19 container",
                    word(payload, i)
                ),
                RECREATE,
            );
        }
    }
    Ok(ContainerLayout {
        radix,
        negative,
        payload: HEADER_LEN..bytes.len(),
    })
}

/// Writes `limbs` (trimmed; empty for zero) as a container. `negative` must
/// already be false for zero.
pub(crate) fn write<W: Write>(
    w: &mut W,
    radix: Radix,
    negative: bool,
    limbs: &[u64],
) -> io::Result<()> {
    if radix == Radix::Decimal {
        if let Some(i) = limbs.par_iter().position_first(|&x| x >= DEC_BASE) {
            return Err(io::Error::new(
                io::ErrorKind::InvalidInput,
                format!(
                    "limb {i} is {}, which is not below 10^19: not a decimal limb",
                    limbs[i]
                ),
            ));
        }
    }
    // The hash precedes the payload in the file, so the payload is hashed in
    // a first pass; the writer need not be seekable.
    let mut buf = Vec::new();
    let mut hasher = blake3::Hasher::new();
    for chunk in limbs.chunks(IO_CHUNK_LIMBS) {
        limbs_to_bytes(chunk, &mut buf);
        hasher.update_rayon(&buf);
    }
    let hash = hasher.finalize();

    let mut header = [0u8; HEADER_LEN];
    header[0..8].copy_from_slice(&MAGIC);
    header[8..10].copy_from_slice(&VERSION.to_le_bytes());
    header[10] = match radix {
        Radix::Binary => 0,
        Radix::Decimal => 1,
    };
    header[11] = u8::from(negative);
    header[16..24].copy_from_slice(&(limbs.len() as u64).to_le_bytes());
    header[24..32].copy_from_slice(&(HEADER_LEN as u64).to_le_bytes());
    header[32..64].copy_from_slice(hash.as_bytes());
    w.write_all(&header)?;
    for chunk in limbs.chunks(IO_CHUNK_LIMBS) {
        limbs_to_bytes(chunk, &mut buf);
        w.write_all(&buf)?;
    }
    Ok(())
}
