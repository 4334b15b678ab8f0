//! `lapse provenance`: the provenance metadata of an output file, as text.

use std::path::Path;

use crate::io::{IoError, read_parquet_metadata};

/// Errors of reading provenance.
#[derive(Debug, thiserror::Error)]
pub enum ProvenanceError {
    #[error(transparent)]
    Io(#[from] IoError),
    #[error("{0}: no key-value metadata (not written by lapse?)")]
    Empty(std::path::PathBuf),
}

/// One line per `lapse.*` entry, a count of other entries, then the pipeline text.
pub fn render(file: &Path) -> Result<String, ProvenanceError> {
    let md = read_parquet_metadata(file)?;
    if md.is_empty() {
        return Err(ProvenanceError::Empty(file.into()));
    }
    let mut out = String::new();
    let (mut text, mut others) = (None, 0);
    for (k, v) in &md {
        if k == "lapse.pipeline.text" {
            text = Some(v.clone());
        } else if let Some(key) = k.strip_prefix("lapse.") {
            out.push_str(&format!("{key:<48} {v}\n"));
        } else {
            others += 1;
        }
    }
    if others > 0 {
        out.push_str(&format!("({others} other metadata entries, e.g. the Arrow schema, not shown)\n"));
    }
    if let Some(t) = text {
        out.push_str(&format!("\n# pipeline text (lapse.pipeline.text)\n{t}\n"));
    }
    Ok(out)
}
