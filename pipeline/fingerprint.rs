//! SHA-256 fingerprints: of raw bytes, of files (streamed), and the combination of manifest, data and
//! tool version that names an experiment. The logical (content) hash of a table lives beside the
//! table in `data::table`, because it walks the typed columns.

use sha2::{Digest, Sha256};
use std::io::Read;
use std::path::Path;

use crate::error::{Error, Result};

/// Lower-case hex of a digest.
pub fn hex(bytes: &[u8]) -> String {
    const DIGITS: &[u8; 16] = b"0123456789abcdef";
    let mut out = String::with_capacity(bytes.len() * 2);
    for b in bytes {
        out.push(DIGITS[(b >> 4) as usize] as char);
        out.push(DIGITS[(b & 15) as usize] as char);
    }
    out
}

pub fn sha256_hex(bytes: &[u8]) -> String {
    hex(&Sha256::digest(bytes))
}

/// SHA-256 of a file's bytes, read in 1 MiB blocks.
pub fn file_sha256(path: &Path) -> Result<String> {
    let file = std::fs::File::open(path).map_err(|e| Error::io(path, "open the data file", e))?;
    Ok(reader_sha256(file, path)?.0)
}

/// SHA-256 of everything `reader` yields, read in 1 MiB blocks, and the byte count; `path` names
/// the file in errors.
pub fn reader_sha256(mut reader: impl Read, path: &Path) -> Result<(String, u64)> {
    let mut hasher = Sha256::new();
    let (mut buf, mut bytes) = (vec![0u8; 1 << 20], 0u64);
    loop {
        let n = reader.read(&mut buf).map_err(|e| Error::io(path, "read the data file", e))?;
        if n == 0 {
            break;
        }
        hasher.update(&buf[..n]);
        bytes += n as u64;
    }
    Ok((hex(&hasher.finalize()), bytes))
}

/// The experiment fingerprint: SHA-256 over the canonical manifest hash, the logical data hash and
/// the tool version, each length-prefixed so no two different triples can collide by concatenation.
pub fn experiment_fingerprint(manifest_hash: &str, data_content_hash: &str, tool_version: &str) -> String {
    let mut hasher = Sha256::new();
    hasher.update(b"tabcard-experiment-v1");
    for part in [manifest_hash, data_content_hash, tool_version] {
        hasher.update((part.len() as u64).to_le_bytes());
        hasher.update(part.as_bytes());
    }
    hex(&hasher.finalize())
}

/// The run-inputs digest: SHA-256 over named parts (what decides a run's stored bits besides its
/// settings and seed), each name and value length-prefixed, in the order given.
pub fn run_inputs_digest(parts: &[(&str, &[u8])]) -> String {
    let mut hasher = Sha256::new();
    hasher.update(b"tabcard-run-inputs-v1");
    for (name, value) in parts {
        for bytes in [name.as_bytes(), value] {
            hasher.update((bytes.len() as u64).to_le_bytes());
            hasher.update(bytes);
        }
    }
    hex(&hasher.finalize())
}

#[cfg(test)]
mod tests {
    use super::*;

    // FIPS 180-2, Appendix B.1: SHA-256("abc").
    #[test]
    fn sha256_of_abc_matches_fips_180_2_example() {
        assert_eq!(sha256_hex(b"abc"), "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
    }

    #[test]
    fn experiment_fingerprint_changes_with_each_part() {
        let base = experiment_fingerprint("m", "d", "0.1.0");
        assert_ne!(base, experiment_fingerprint("m2", "d", "0.1.0"));
        assert_ne!(base, experiment_fingerprint("m", "d2", "0.1.0"));
        assert_ne!(base, experiment_fingerprint("m", "d", "0.1.1"));
        assert_ne!(experiment_fingerprint("ab", "c", "v"), experiment_fingerprint("a", "bc", "v"));
    }
}
