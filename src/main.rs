//! The `lapse` command: parses arguments, calls the library, prints, and sets
//! the exit code (0 ok, 1 check failed or tolerance exceeded, 2 error).

mod cli;

use std::io::Write;
use std::process::ExitCode;

use anyhow::{Context, Result};
use clap::Parser;
use cli::{Cli, Command};
use lapse::commands;

fn main() -> ExitCode {
    cli::tune_allocator();
    cli::quiet_guarded_panics();
    let cli = Cli::parse();
    cli::init_logging(&cli);
    match dispatch(cli) {
        Ok(code) => code,
        // A closed stdout (`lapse time … | head`) is not an error.
        Err(e) if e.chain().any(|c| c.downcast_ref::<std::io::Error>().is_some_and(|e| e.kind() == std::io::ErrorKind::BrokenPipe)) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("lapse: error: {}", cli::render_error(&e));
            ExitCode::from(2)
        }
    }
}

fn print(text: &str) -> Result<()> {
    let mut out = std::io::stdout().lock();
    out.write_all(text.as_bytes())?;
    out.flush()?;
    Ok(())
}

fn dispatch(cli: Cli) -> Result<ExitCode> {
    let quiet = cli.quiet;
    match cli.command {
        Command::Check { pipeline, input } => {
            let report = commands::check::check(&pipeline, input.as_deref());
            print(&report.render())?;
            Ok(ExitCode::from(report.exit_code()))
        }
        Command::Run(args) => {
            let (opts, progress) = cli::run_options(&args, quiet)?;
            let mut warn = |r: &lapse::pipeline::Preflight| r.findings.iter().filter(|f| f.level >= lapse::pipeline::Level::Note).for_each(|f| tracing::warn!("preflight: {}", f.text));
            let result = commands::run::run(&args.pipeline, &opts, &mut warn);
            if let Some(p) = progress {
                p.finish();
            }
            let summary = result?;
            let json = lapse::pipeline::stream::summary_json(&summary, None);
            match args.summary_json.as_deref() {
                Some(p) if p == std::path::Path::new("-") => print(&json)?,
                Some(p) => std::fs::write(p, &json).with_context(|| format!("cannot write {}", p.display()))?,
                None => {}
            }
            if !quiet && args.summary_json.as_deref() != Some(std::path::Path::new("-")) {
                print(&commands::run::render_summary(&args.pipeline, &summary))?;
            }
            match commands::run::rejected_beyond(&summary, args.max_rejected_fraction)? {
                Some(message) => {
                    eprintln!("lapse: {message}");
                    Ok(ExitCode::from(3))
                }
                None => Ok(ExitCode::SUCCESS),
            }
        }
        Command::Synth { pipeline, plan, output, noise_ns, noise_from_sigma, seed } => {
            let opts = lapse::pipeline::SynthOptions { noise_s: noise_ns.map(|ns| ns * 1e-9), noise_from_sigma, seed };
            let n = commands::synth::synth(&pipeline, &plan, &output, &opts)?;
            if !quiet {
                print(&format!("wrote {n} rows to {}\n", output.display()))?;
            }
            Ok(ExitCode::SUCCESS)
        }
        Command::Diff { a, b, keys, tolerances, tolerance_file, report, rows } => {
            let keys = if keys.is_empty() { vec!["obs_id".to_string()] } else { keys };
            let mut tol = match &tolerance_file {
                Some(p) => lapse::diff::Tolerances::from_toml_file(p)?,
                None => lapse::diff::Tolerances::default(),
            };
            for t in &tolerances {
                tol.add_arg(t)?;
            }
            let (r, row_diffs) = lapse::diff::diff(&a, &b, &keys, &tol, rows.is_some())?;
            if !quiet {
                print(&lapse::diff::render(&r, false))?;
            }
            if let Some(p) = &report {
                std::fs::write(p, lapse::diff::render(&r, true)).with_context(|| format!("cannot write {}", p.display()))?;
            }
            if let (Some(p), Some(rd)) = (&rows, row_diffs) {
                lapse::diff::write_rows(rd, &keys.join("+"), p)?;
            }
            Ok(if r.within_tolerance() { ExitCode::SUCCESS } else { ExitCode::from(1) })
        }
        Command::Export { file, csv: _, output } => {
            commands::export::export_csv(&file, output.as_deref())?;
            Ok(ExitCode::SUCCESS)
        }
        Command::Provenance { file } => {
            print(&commands::provenance::render(&file)?)?;
            Ok(ExitCode::SUCCESS)
        }
        Command::Kernels { paths } => {
            print(&lapse::ephemeris::Ephemeris::load(&paths)?.listing())?;
            Ok(ExitCode::SUCCESS)
        }
        Command::Time(args) => {
            let format: commands::time::TimeFormat = args.format.parse()?;
            print(&commands::time::convert_as(&args.into_request(), format)?)?;
            Ok(ExitCode::SUCCESS)
        }
    }
}
