//! Model weights as safetensors (f32, little-endian, tensors in name order) and their SHA-256
//! digests, per tensor and over the whole set.

use sha2::{Digest, Sha256};
use std::collections::BTreeMap;
use std::path::Path;

use crate::error::{Error, Result};
use crate::fingerprint::hex;
use crate::nn::mlp::NamedTensor;

fn le_bytes(values: &[f32]) -> Vec<u8> {
    values.iter().flat_map(|v| v.to_le_bytes()).collect()
}

/// SHA-256 of each tensor's shape and little-endian f32 bytes.
pub(crate) fn tensor_digests(tensors: &[NamedTensor]) -> BTreeMap<String, String> {
    tensors
        .iter()
        .map(|t| {
            let mut h = Sha256::new();
            for d in &t.shape {
                h.update((*d as u64).to_le_bytes());
            }
            h.update(le_bytes(&t.values));
            (t.name.clone(), hex(&h.finalize()))
        })
        .collect()
}

/// One digest over every tensor digest in name order.
pub(crate) fn weights_digest(tensors: &[NamedTensor]) -> String {
    let mut h = Sha256::new();
    for (name, digest) in tensor_digests(tensors) {
        h.update(name.as_bytes());
        h.update(b"\0");
        h.update(digest.as_bytes());
        h.update(b"\n");
    }
    hex(&h.finalize())
}

pub(crate) fn encode(tensors: &[NamedTensor]) -> Result<Vec<u8>> {
    let buffers: Vec<(String, Vec<usize>, Vec<u8>)> =
        tensors.iter().map(|t| (t.name.clone(), t.shape.clone(), le_bytes(&t.values))).collect();
    let mut views = Vec::with_capacity(buffers.len());
    for (name, shape, bytes) in &buffers {
        let view = safetensors::tensor::TensorView::new(safetensors::Dtype::F32, shape.clone(), bytes)
            .map_err(|e| Error::Encode(format!("tensor `{name}` as safetensors: {e}")))?;
        views.push((name.clone(), view));
    }
    safetensors::serialize(views, None).map_err(|e| Error::Encode(format!("safetensors: {e}")))
}

/// Reads a safetensors file written by [`encode`]; anything else is a store error naming the file.
pub(crate) fn decode(bytes: &[u8], path: &Path) -> Result<Vec<NamedTensor>> {
    let st = safetensors::SafeTensors::deserialize(bytes)
        .map_err(|e| Error::store(path, format!("unreadable or truncated safetensors file: {e}")))?;
    let mut out = Vec::new();
    for (name, view) in st.iter() {
        if view.dtype() != safetensors::Dtype::F32 {
            return Err(Error::store(path, format!("tensor `{name}` has dtype {:?}, expected F32", view.dtype())));
        }
        let values = view.data().chunks_exact(4).map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]])).collect();
        out.push(NamedTensor { name: name.to_string(), shape: view.shape().to_vec(), values });
    }
    out.sort_by(|a, b| a.name.cmp(&b.name));
    Ok(out)
}
