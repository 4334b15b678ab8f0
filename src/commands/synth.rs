//! `lapse synth`: observations exact under a pipeline's model, from a plan,
//! written as a Parquet input table with provenance.

use std::path::Path;

use crate::io::write_parquet;
use crate::pipeline::{PipelineError, PipelineFile, Provenance, SynthOptions};

/// Writes synthetic observations for `plan` to `out`; returns the row count.
pub fn synth(pipeline: &Path, plan: &Path, out: &Path, opts: &SynthOptions) -> Result<usize, PipelineError> {
    if let Some(s) = opts.noise_s
        && !(s.is_finite() && s >= 0.0)
    {
        return Err(PipelineError::Input { path: plan.into(), message: format!("noise σ {s} s must be finite and ≥ 0") });
    }
    let file = PipelineFile::read(pipeline)?;
    let mut kind = crate::kinds::load(&file)?;
    let mut df = kind.synthesise(plan, opts)?;
    let mut prov = Provenance::start(&file);
    prov.set("synth.plan", &plan.display().to_string());
    let noise = match (opts.noise_s, opts.noise_from_sigma) {
        (Some(s), _) => format!("gaussian, σ = {s:e} s"),
        (None, true) => "gaussian, each row's sigma".into(),
        (None, false) => "none".into(),
    };
    prov.set("synth.noise", &noise);
    prov.set("synth.seed", &opts.seed.to_string());
    let n = df.height();
    prov.set_rows(n, n, 0);
    write_parquet(&mut df, out, &prov.finish())?;
    Ok(n)
}
