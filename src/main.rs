//! The `lapse` command: parses arguments, calls the library, prints, and sets
//! the exit code (0 ok, 1 check failed or tolerance exceeded, 2 error).

use std::io::{BufRead, Write};
use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::{Context, Result, bail};
use clap::{Parser, Subcommand};

use lapse::time::{ExpiryPolicy, LeapSecondTable, TimeScale, TimeScales, parse_epoch};

#[derive(Parser)]
#[command(name = "lapse", version, about = "Relativistic corrections and residuals for time-tagged observations")]
struct Cli {
    /// More log output (-v info, -vv debug).
    #[arg(short, long, action = clap::ArgAction::Count, global = true)]
    verbose: u8,
    /// Only errors on stderr.
    #[arg(short, long, global = true)]
    quiet: bool,
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Run a pipeline file (kind selects the job).
    Run {
        /// The pipeline TOML file.
        pipeline: PathBuf,
        /// Read this input (file, folder or glob) instead of the pipeline's
        /// [input] path — one partition per job on a cluster.
        #[arg(long)]
        input: Option<PathBuf>,
        /// Write the output here instead of the pipeline's [output] path.
        #[arg(long)]
        output: Option<PathBuf>,
        /// Worker threads for the computation and the Parquet reader and writer (default: RAYON_NUM_THREADS or all cores).
        #[arg(long)]
        threads: Option<usize>,
        /// Rows per parallel work unit; results do not depend on it.
        #[arg(long, default_value_t = lapse::pipeline::DEFAULT_CHUNK_ROWS)]
        chunk_rows: usize,
        /// Do not write residual plots.
        #[arg(long)]
        no_plots: bool,
    },
    /// Check a pipeline and its inputs without computing residuals: schema,
    /// unknown stations, coverage of kernels, EOP, leap seconds and clock
    /// tables. Exit 0 clean, 1 problems found, 2 unusable.
    Check {
        /// The pipeline TOML file.
        pipeline: PathBuf,
    },
    /// Write arrival times that are exact under a pulsar pipeline's model
    /// (solved to ≤ 1 ps), optionally with white noise.
    Synth {
        /// The pulsar pipeline whose model, sites and clocks are used.
        pipeline: PathBuf,
        /// Plan CSV: site,mjd,freq_mhz,sigma_us (approximate epochs).
        #[arg(long)]
        plan: PathBuf,
        /// Output Parquet file.
        #[arg(long)]
        output: PathBuf,
        /// Add Gaussian noise of this σ (ns) to every arrival time.
        #[arg(long, conflicts_with = "noise_from_sigma")]
        noise_ns: Option<f64>,
        /// Add Gaussian noise of each row's own sigma_us.
        #[arg(long)]
        noise_from_sigma: bool,
        /// Seed of the noise generator.
        #[arg(long, default_value_t = 1)]
        seed: u64,
    },
    /// Compare two residual tables: per-column differences with tolerances,
    /// unmatched rows and columns, and which provenance entries differ.
    /// Exit 0 within tolerance, 1 beyond it or unmatched rows, 2 error.
    Diff {
        a: PathBuf,
        b: PathBuf,
        /// Key column(s) to join on (repeatable; default obs_id).
        #[arg(long = "key")]
        keys: Vec<String>,
        /// Absolute tolerance COLUMN=VALUE in the column's unit (repeatable);
        /// columns not named must match exactly.
        #[arg(long = "tolerance")]
        tolerances: Vec<String>,
        /// TOML file of tolerances: `default = …` and a [tolerances] table.
        #[arg(long)]
        tolerance_file: Option<PathBuf>,
        /// Write the report as Markdown here.
        #[arg(long)]
        report: Option<PathBuf>,
        /// Write the per-row differences (B − A) as Parquet here.
        #[arg(long)]
        rows: Option<PathBuf>,
    },
    /// Print the provenance metadata of an output file.
    Provenance {
        /// A Parquet file written by lapse.
        file: PathBuf,
    },
    /// List the segments of SPK kernels: bodies, centres, frames, types, coverage.
    Kernels {
        /// SPK files.
        #[arg(required = true)]
        paths: Vec<PathBuf>,
    },
    /// Convert epochs between time scales, printed to the femtosecond.
    Time {
        /// Epochs: YYYY-MM-DDThh:mm:ss[.f], mjd:DAYS[.f] (or a bare MJD), jd:DAYS[.f].
        epochs: Vec<String>,
        /// Scale of the given epochs: utc, tai, tt, gps, tcg, tcb, tdb.
        #[arg(long, default_value = "utc")]
        from: String,
        /// Scales to print, comma separated (default: all but ut1).
        #[arg(long, value_delimiter = ',')]
        to: Vec<String>,
        /// Read epochs from a file, one per line ('#' starts a comment).
        #[arg(long)]
        file: Option<PathBuf>,
        /// IERS Leap_Second.dat to use instead of the built-in table.
        #[arg(long)]
        leap_file: Option<PathBuf>,
        /// Accept UTC past the leap-second table's last known window, assuming
        /// no further leap seconds (planning only).
        #[arg(long)]
        extend_leaps: bool,
        /// Topocentric part of TDB − TT for the observer, seconds (v_E·x/c²);
        /// 0 is the geocentre. Computed instead when --site is given.
        #[arg(long, default_value_t = 0.0, allow_hyphen_values = true)]
        observer_term_s: f64,
        /// Station code: compute the topocentric TDB − TT term for it
        /// (needs --stations, --kernel and --eop).
        #[arg(long, requires_all = ["stations", "kernel", "eop"])]
        site: Option<String>,
        /// Station catalogue (TOML).
        #[arg(long)]
        stations: Option<PathBuf>,
        /// Planetary SPK kernel for the Earth's velocity.
        #[arg(long)]
        kernel: Option<PathBuf>,
        /// IERS EOP file (finals2000A or C04); also enables UT1.
        #[arg(long)]
        eop: Option<PathBuf>,
    },
}

/// Keeps the memory a batch frees for its next allocations instead of
/// returning it to the kernel and faulting fresh pages in again: one malloc
/// arena (the hot loops do not allocate per row, so threads do not contend
/// on it), blocks below 32 MiB from the heap, the heap grown by 64 MiB and
/// trimmed only past 1 GiB. On the benchmark machine a 10⁵-row pulsar run
/// takes ≈ 28 000 page faults without this and ≈ 18 000 with it (≈ 6 % of
/// its wall time; one run each). Only the binary does this; the library and
/// the Python binding leave their host's allocator alone.
#[cfg(all(target_os = "linux", target_env = "gnu"))]
fn tune_allocator() {
    // SAFETY: mallopt only changes glibc malloc parameters; called before any
    // thread is started. A refused setting (return 0) leaves the default.
    unsafe {
        libc::mallopt(libc::M_ARENA_MAX, 1);
        libc::mallopt(libc::M_MMAP_THRESHOLD, 32 << 20);
        libc::mallopt(libc::M_TRIM_THRESHOLD, 1 << 30);
        libc::mallopt(libc::M_TOP_PAD, 64 << 20);
    }
}

#[cfg(not(all(target_os = "linux", target_env = "gnu")))]
fn tune_allocator() {}

fn main() -> ExitCode {
    tune_allocator();
    // Panics inside guarded readers of outside files (and polars' own worker
    // threads) are turned into errors by the library: keep them off the
    // terminal. Any other panic is a bug and is reported as usual.
    let default_hook = std::panic::take_hook();
    std::panic::set_hook(Box::new(move |info| {
        let polars_thread = std::thread::current().name().is_some_and(|n| n.starts_with("polars"));
        if !(lapse::io::in_guarded_reader() || polars_thread) {
            default_hook(info);
        }
    }));
    let cli = Cli::parse();
    // `run` reports progress at info level by default; other commands only warn.
    let default_info = matches!(cli.command, Command::Run { .. });
    let level = if cli.quiet {
        "error"
    } else {
        match (cli.verbose, default_info) {
            (0, false) => "warn",
            (0, true) | (1, _) => "info",
            _ => "debug",
        }
    };
    let filter = tracing_subscriber::EnvFilter::try_from_env("LAPSE_LOG")
        .unwrap_or_else(|_| tracing_subscriber::EnvFilter::new(level));
    use std::io::IsTerminal;
    tracing_subscriber::fmt().with_env_filter(filter).with_writer(std::io::stderr).with_ansi(std::io::stderr().is_terminal()).init();
    match dispatch(cli) {
        Ok(code) => code,
        Err(e) => {
            eprintln!("lapse: error: {e:#}");
            ExitCode::from(2)
        }
    }
}

fn dispatch(cli: Cli) -> Result<ExitCode> {
    match cli.command {
        Command::Check { pipeline } => {
            let report = lapse::pipeline::preflight::preflight(&pipeline);
            print!("{}", report.render());
            Ok(ExitCode::from(report.exit_code()))
        }
        Command::Run { pipeline, input, output, threads, chunk_rows, no_plots } => {
            // Every parallel step (loading, grids, rows, and the Parquet
            // reader and writer) uses this many threads.
            if let Some(n) = threads {
                if std::env::var_os("POLARS_MAX_THREADS").is_none() {
                    // SAFETY: no other thread exists yet (the worker pool is
                    // built below, polars' pool on its first use).
                    unsafe { std::env::set_var("POLARS_MAX_THREADS", n.to_string()) };
                }
                rayon::ThreadPoolBuilder::new().num_threads(n).build_global().context("cannot start the worker threads")?;
            }
            // The same checks as `lapse check`, first: stop when unusable,
            // report problems (their rows will be rejected with reasons).
            // The shared inputs it loads are kept for the run (read once).
            let t0 = std::time::Instant::now();
            let (report, prepared) = lapse::pipeline::preflight::preflight_prepared(&pipeline, input.as_deref());
            tracing::debug!(preflight_s = t0.elapsed().as_secs_f64(), "preflight done");
            match report.exit_code() {
                2 => {
                    eprint!("{}", report.render());
                    let first = report.findings.iter().find(|f| f.level == lapse::pipeline::preflight::Level::Unusable).map(|f| f.text.clone()).unwrap_or_default();
                    bail!("preflight: {first}");
                }
                1 if !cli.quiet => {
                    for f in report.findings.iter().filter(|f| f.level >= lapse::pipeline::preflight::Level::Note) {
                        tracing::warn!("preflight: {}", f.text);
                    }
                }
                _ => {}
            }
            let Some(prepared) = prepared else { bail!("preflight: the pipeline cannot be read") };
            let progress = std::sync::Arc::new(std::sync::atomic::AtomicUsize::new(0));
            let opts = lapse::pipeline::RunOptions { input: input.clone(), output, chunk_rows, plots: !no_plots, progress: Some(progress.clone()) };
            let done = std::sync::Arc::new(std::sync::atomic::AtomicBool::new(false));
            let watcher = (!cli.quiet).then(|| spawn_progress(&pipeline, input.as_deref(), progress, done.clone()));
            let result = run(&pipeline, prepared, &opts, cli.quiet);
            done.store(true, std::sync::atomic::Ordering::Relaxed);
            if let Some(w) = watcher {
                w.thread().unpark();
                let _ = w.join();
            }
            result
        }
        Command::Synth { pipeline, plan, output, noise_ns, noise_from_sigma, seed } => {
            let file = lapse::pipeline::PipelineFile::read(&pipeline)?;
            if file.kind == "tracking" {
                if noise_ns.is_some() {
                    bail!("--noise-ns is for pulsar pipelines; tracking noise comes from each row's sigma (--noise-from-sigma)");
                }
                let n = lapse::pipeline::tracking::synthesize_tracking(&file, &plan, &output, noise_from_sigma, seed)?;
                if !cli.quiet {
                    println!("wrote {n} measurements to {}", output.display());
                }
                return Ok(ExitCode::SUCCESS);
            }
            if file.kind != "pulsar" {
                bail!("{}: synth needs a pulsar or tracking pipeline, found '{}'", pipeline.display(), file.kind);
            }
            let noise = match (noise_ns, noise_from_sigma) {
                (Some(ns), _) if !(ns.is_finite() && ns >= 0.0) => bail!("--noise-ns {ns} must be finite and ≥ 0"),
                (Some(ns), _) => lapse::pipeline::pulsar::SynthNoise::FixedS(ns * 1e-9),
                (None, true) => lapse::pipeline::pulsar::SynthNoise::FromSigma,
                (None, false) => lapse::pipeline::pulsar::SynthNoise::None,
            };
            let n = lapse::pipeline::pulsar::synthesize(&file, &plan, &output, noise, seed)?;
            if !cli.quiet {
                println!("wrote {n} arrival times to {}", output.display());
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
            if !cli.quiet {
                print!("{}", lapse::diff::render(&r, false));
            }
            if let Some(p) = &report {
                std::fs::write(p, lapse::diff::render(&r, true)).with_context(|| format!("cannot write {}", p.display()))?;
            }
            if let (Some(p), Some(rd)) = (&rows, row_diffs) {
                lapse::diff::write_rows(rd, &keys.join("+"), p)?;
            }
            Ok(if r.within_tolerance() { ExitCode::SUCCESS } else { ExitCode::from(1) })
        }
        Command::Provenance { file } => {
            let md = lapse::io::read_parquet_metadata(&file)?;
            if md.is_empty() {
                bail!("{}: no key-value metadata (not written by lapse?)", file.display());
            }
            let mut text = None;
            let mut others = 0;
            for (k, v) in &md {
                if k == "lapse.pipeline.text" {
                    text = Some(v.clone());
                    continue;
                }
                if !k.starts_with("lapse.") {
                    others += 1;
                    continue;
                }
                println!("{:<48} {v}", k.trim_start_matches("lapse."));
            }
            if others > 0 {
                println!("({others} other metadata entries, e.g. the Arrow schema, not shown)");
            }
            if let Some(t) = text {
                println!("\n# pipeline text (lapse.pipeline.text)\n{t}");
            }
            Ok(ExitCode::SUCCESS)
        }
        Command::Kernels { paths } => {
            let eph = lapse::ephemeris::Ephemeris::load(&paths)?;
            print!("{}", eph.listing());
            Ok(ExitCode::SUCCESS)
        }
        Command::Time { epochs, from, to, file, leap_file, extend_leaps, observer_term_s, site, stations, kernel, eop } => {
            let site = match (site, stations, kernel) {
                (Some(code), Some(st), Some(k)) => Some(SiteArgs { code, stations: st, kernel: k }),
                _ => None,
            };
            time(TimeArgs { epochs, from, to, file, leap_file, extend_leaps, observer_term_s, site, eop })
        }
    }
}

/// Progress display: a bar with rows/s and time remaining on an interactive
/// terminal (after the first second), periodic log lines otherwise.
fn spawn_progress(pipeline: &std::path::Path, input: Option<&std::path::Path>, counter: std::sync::Arc<std::sync::atomic::AtomicUsize>, done: std::sync::Arc<std::sync::atomic::AtomicBool>) -> std::thread::JoinHandle<()> {
    use std::io::IsTerminal;
    use std::sync::atomic::Ordering;
    let total = lapse::pipeline::input_rows(pipeline, input).unwrap_or(0) as u64;
    let tty = std::io::stderr().is_terminal();
    std::thread::spawn(move || {
        let start = std::time::Instant::now();
        let mut bar: Option<indicatif::ProgressBar> = None;
        let mut last_log = std::time::Instant::now();
        while !done.load(Ordering::Relaxed) {
            // Woken early by unpark when the run ends (no 100 ms wait at exit).
            std::thread::park_timeout(std::time::Duration::from_millis(100));
            let n = counter.load(Ordering::Relaxed) as u64;
            if tty && bar.is_none() && start.elapsed().as_secs_f64() > 1.0 {
                let b = indicatif::ProgressBar::new(total.max(1));
                b.set_style(indicatif::ProgressStyle::with_template("{bar:40} {pos}/{len} rows  {per_sec}  eta {eta}").unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()));
                bar = Some(b);
            }
            if let Some(b) = &bar {
                b.set_position(n);
            } else if !tty && last_log.elapsed().as_secs() >= 10 {
                let rate = n as f64 / start.elapsed().as_secs_f64();
                tracing::info!(rows = n, total, rows_per_s = rate.round(), "progress");
                last_log = std::time::Instant::now();
            }
        }
        if let Some(b) = bar {
            b.finish_and_clear();
        }
    })
}

fn run(pipeline: &std::path::Path, prepared: lapse::pipeline::preflight::Prepared, opts: &lapse::pipeline::RunOptions, quiet: bool) -> Result<ExitCode> {
    let s = lapse::pipeline::run_prepared(prepared, opts)?;
    if !quiet {
        let mut out = std::io::stdout().lock();
        writeln!(out, "pipeline   {}", pipeline.display())?;
        writeln!(out, "rows in    {}", s.rows_in)?;
        writeln!(out, "rows out   {}  → {}", s.rows_out, s.output.display())?;
        writeln!(out, "rejected   {}  → {}", s.rows_rejected, s.rejects.display())?;
        if s.partitions_done + s.partitions_skipped > 1 {
            writeln!(out, "partitions {} processed, {} up to date (skipped)", s.partitions_done, s.partitions_skipped)?;
        }
        if !s.plots.is_empty() {
            writeln!(out, "plots      {}", s.plots.iter().filter(|p| p.extension().is_some_and(|e| e == "png")).map(|p| p.display().to_string()).collect::<Vec<_>>().join(", "))?;
        }
        for (reason, n) in &s.rejects_by_reason {
            writeln!(out, "  {n:>8}  {reason}")?;
        }
        for note in &s.notes {
            writeln!(out, "{note}")?;
        }
    }
    Ok(ExitCode::SUCCESS)
}

struct SiteArgs {
    code: String,
    stations: PathBuf,
    kernel: PathBuf,
}

struct TimeArgs {
    epochs: Vec<String>,
    from: String,
    to: Vec<String>,
    file: Option<PathBuf>,
    leap_file: Option<PathBuf>,
    extend_leaps: bool,
    observer_term_s: f64,
    site: Option<SiteArgs>,
    eop: Option<PathBuf>,
}

fn time(args: TimeArgs) -> Result<ExitCode> {
    let TimeArgs { mut epochs, from, to, file, leap_file, extend_leaps, observer_term_s, site, eop } = args;
    let to = &to;
    let from: TimeScale = from.parse().context("--from")?;
    let targets: Vec<TimeScale> = if to.is_empty() {
        // UT1 by default only when Earth-orientation data are given.
        TimeScale::ALL.into_iter().filter(|s| *s != TimeScale::Ut1 || eop.is_some()).collect()
    } else {
        to.iter().map(|s| s.parse::<TimeScale>()).collect::<Result<_, _>>().context("--to")?
    };
    if (targets.contains(&TimeScale::Ut1) || from == TimeScale::Ut1) && eop.is_none() {
        bail!("UT1 needs Earth-orientation data: give --eop FILE (IERS finals2000A or C04)");
    }
    let mut leaps = match &leap_file {
        Some(p) => LeapSecondTable::from_file(p)?,
        None => LeapSecondTable::builtin(),
    };
    if extend_leaps {
        leaps = leaps.with_policy(ExpiryPolicy::ExtendLastOffset);
    }
    let mut ts = TimeScales::new(leaps);
    let mut earth = None;
    let mut eop_table = None;
    if let Some(path) = &eop {
        let table = std::sync::Arc::new(lapse::earth::EopTable::from_file(path)?);
        ts = ts.with_ut1(table.clone());
        eop_table = Some(table.clone());
        if let Some(s) = &site {
            let cat = lapse::earth::StationCatalog::from_file(&s.stations)?;
            let station = cat.get(&s.code)?.clone();
            let eph = lapse::ephemeris::Ephemeris::load(&[&s.kernel])?;
            let model = lapse::earth::EarthModel::new(ts.clone(), (*table).clone());
            earth = Some((model, eph, station));
        }
    }
    let mut sources: Vec<String> = epochs.iter().enumerate().map(|(i, _)| format!("argument {}", i + 1)).collect();
    if let Some(path) = &file {
        let f = std::fs::File::open(path).with_context(|| format!("cannot open {}", path.display()))?;
        for (i, line) in std::io::BufReader::new(f).lines().enumerate() {
            let line = line.with_context(|| format!("cannot read {}", path.display()))?;
            let body = line.split('#').next().unwrap_or("").trim();
            if !body.is_empty() {
                epochs.push(body.to_string());
                sources.push(format!("{} line {}", path.display(), i + 1));
            }
        }
    }
    if epochs.is_empty() {
        bail!("no epochs given (arguments or --file)");
    }
    let mut out = std::io::stdout().lock();
    for (text, source) in epochs.iter().zip(&sources) {
        let e = parse_epoch(&ts, from, text).with_context(|| source.clone())?;
        writeln!(out, "# {text} ({from})")?;
        let mut observer_s = observer_term_s;
        if let Some((model, eph, station)) = &earth {
            let state = model.station_state_at(eph, station, &e).with_context(|| format!("{source}: {text} at site {}", station.code))?;
            let term_s = state.observer_term_s;
            observer_s = term_s;
            writeln!(out, "# site {}: topocentric TDB − TT = {term_s:+.15e} s (v_E·x/c²){}", station.code, if state.eop.predicted { "; EOP values are PREDICTIONS" } else { "" })?;
        }
        if let (Some(table), true) = (&eop_table, targets.contains(&TimeScale::Ut1)) {
            let utc = ts.convert(e, TimeScale::Utc, observer_s).with_context(|| format!("{source}: {text}"))?;
            if table.at_utc(ts.leap_seconds(), &utc).with_context(|| format!("{source}: {text}"))?.predicted {
                writeln!(out, "# UT1 uses PREDICTED Earth-orientation values from {}", table.path().display())?;
            }
        }
        for t in &targets {
            let c = ts.convert(e, *t, observer_s).with_context(|| format!("{source}: {text}"))?;
            let mjd = ts.mjd_fraction_digits(&c, 18)?;
            let iso = c.to_string();
            let iso = iso.rsplit_once(' ').map(|(a, _)| a).unwrap_or(&iso);
            writeln!(out, "{:<4} {iso}  MJD {mjd}", t.name())?;
        }
    }
    Ok(ExitCode::SUCCESS)
}
