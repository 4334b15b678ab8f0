//! Command-line arguments of `lapse` and process set-up (allocator, logging,
//! panics of guarded readers). Only the binary uses this module.

use std::path::PathBuf;
use std::sync::Arc;
use std::sync::atomic::AtomicUsize;

use anyhow::{Context, Result};
use clap::{Parser, Subcommand};

#[derive(Parser)]
#[command(name = "lapse", version, about = "Relativistic corrections and residuals for time-tagged observations")]
pub struct Cli {
    /// More log output (-v info, -vv debug).
    #[arg(short, long, action = clap::ArgAction::Count, global = true)]
    pub verbose: u8,
    /// Only errors on stderr.
    #[arg(short, long, global = true)]
    pub quiet: bool,
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Subcommand)]
pub enum Command {
    /// Run a pipeline file (kind selects the job).
    Run(RunArgs),
    /// Check a pipeline and its inputs without computing residuals: schema,
    /// unknown stations, coverage of kernels, EOP, leap seconds and clock
    /// tables. Exit 0 clean, 1 problems found, 2 unusable.
    Check {
        /// The pipeline TOML file.
        pipeline: PathBuf,
        /// Check this input (file, folder or glob) instead of the pipeline's [input] path.
        #[arg(long)]
        input: Option<PathBuf>,
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
    /// Write a Parquet table (an output of lapse) as CSV text.
    Export {
        /// The Parquet file.
        file: PathBuf,
        /// Write CSV (the one text format; the flag is required to say so).
        #[arg(long, required = true)]
        csv: bool,
        /// Write here instead of stdout.
        #[arg(long)]
        output: Option<PathBuf>,
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
    Time(TimeArgs),
}

/// Arguments of `lapse run`.
#[derive(clap::Args)]
pub struct RunArgs {
    /// The pipeline TOML file.
    pub pipeline: PathBuf,
    /// Read this input (file, folder or glob) instead of the pipeline's
    /// [input] path — one partition per job on a cluster.
    #[arg(long)]
    pub input: Option<PathBuf>,
    /// Write the output here instead of the pipeline's [output] path.
    #[arg(long)]
    pub output: Option<PathBuf>,
    /// Worker threads for the computation and the Parquet reader and writer (default: RAYON_NUM_THREADS or all cores).
    #[arg(long)]
    pub threads: Option<usize>,
    /// Rows per parallel work unit; results do not depend on it.
    #[arg(long, default_value_t = lapse::parallel::DEFAULT_CHUNK_ROWS)]
    pub chunk_rows: usize,
    /// Do not write residual plots.
    #[arg(long)]
    pub no_plots: bool,
    /// Plot formats, comma separated: png (default), svg.
    #[arg(long, value_delimiter = ',', default_value = "png")]
    pub plots: Vec<String>,
    /// Exit with code 3 when more than this fraction of the rows is rejected
    /// (0 … 1; the run still writes everything).
    #[arg(long, default_value_t = lapse::commands::run::DEFAULT_MAX_REJECTED_FRACTION)]
    pub max_rejected_fraction: f64,
    /// Redo partitions whose outputs are up to date.
    #[arg(long)]
    pub force: bool,
    /// Write the run's summary as JSON here ('-': stdout, instead of the text summary).
    #[arg(long)]
    pub summary_json: Option<PathBuf>,
}

/// Arguments of `lapse time`.
#[derive(clap::Args)]
pub struct TimeArgs {
    /// Epochs: YYYY-MM-DDThh:mm:ss[.f], mjd:DAYS[.f] (or a bare MJD), jd:DAYS[.f].
    pub epochs: Vec<String>,
    /// Scale of the given epochs: utc, tai, tt, gps, tcg, tcb, tdb.
    #[arg(long, default_value = "utc")]
    pub from: String,
    /// Scales to print, comma separated (default: all but ut1).
    #[arg(long, value_delimiter = ',')]
    pub to: Vec<String>,
    /// Read epochs from a file, one per line ('#' starts a comment).
    #[arg(long)]
    pub file: Option<PathBuf>,
    /// IERS Leap_Second.dat to use instead of the built-in table.
    #[arg(long)]
    pub leap_file: Option<PathBuf>,
    /// Accept UTC past the leap-second table's last known window, assuming
    /// no further leap seconds (planning only).
    #[arg(long)]
    pub extend_leaps: bool,
    /// Topocentric part of TDB − TT for the observer, seconds (v_E·x/c²);
    /// 0 is the geocentre. Computed instead when --site is given.
    #[arg(long, default_value_t = 0.0, allow_hyphen_values = true)]
    pub observer_term_s: f64,
    /// Station code: compute the topocentric TDB − TT term for it
    /// (needs --stations, --kernel and --eop).
    #[arg(long, requires_all = ["stations", "kernel", "eop"])]
    pub site: Option<String>,
    /// Station catalogue (TOML).
    #[arg(long)]
    pub stations: Option<PathBuf>,
    /// Planetary SPK kernel for the Earth's velocity.
    #[arg(long)]
    pub kernel: Option<PathBuf>,
    /// IERS EOP file (finals2000A or C04); also enables UT1.
    #[arg(long)]
    pub eop: Option<PathBuf>,
    /// Output format: text (default), csv, json.
    #[arg(long, default_value = "text")]
    pub format: String,
}

impl TimeArgs {
    /// The library's request.
    pub fn into_request(self) -> lapse::commands::time::TimeRequest {
        let site = match (self.site, self.stations, self.kernel) {
            (Some(code), Some(st), Some(k)) => Some((code, st, k)),
            _ => None,
        };
        lapse::commands::time::TimeRequest {
            epochs: self.epochs,
            from: self.from,
            to: self.to,
            file: self.file,
            leap_file: self.leap_file,
            extend_leaps: self.extend_leaps,
            observer_term_s: self.observer_term_s,
            site,
            eop: self.eop,
        }
    }
}

/// `--threads` may be at most this many times the cores (more only adds
/// contention; a typo like 100 000 would start that many threads).
pub const MAX_THREADS_PER_CORE: usize = 4;

/// The run's options, with the worker threads set up, and the progress
/// display (unless quiet).
pub fn run_options(args: &RunArgs, quiet: bool) -> Result<(lapse::pipeline::RunOptions, Option<lapse::commands::progress::Progress>)> {
    // Every parallel step (loading, grids, rows, and the Parquet reader and
    // writer) uses this many threads.
    if let Some(n) = args.threads {
        let cores = std::thread::available_parallelism().map(|c| c.get()).unwrap_or(1);
        if n == 0 || n > MAX_THREADS_PER_CORE * cores {
            anyhow::bail!("--threads {n}: give 1 … {} ({MAX_THREADS_PER_CORE} × the {cores} cores here)", MAX_THREADS_PER_CORE * cores);
        }
        if std::env::var_os("POLARS_MAX_THREADS").is_none() {
            // SAFETY: no other thread exists yet (the worker pool is built
            // below, polars' pool on its first use).
            unsafe { std::env::set_var("POLARS_MAX_THREADS", n.to_string()) };
        }
        rayon::ThreadPoolBuilder::new().num_threads(n).build_global().context("cannot start the worker threads")?;
    }
    let plots: Vec<lapse::plots::PlotFormat> = if args.no_plots { Vec::new() } else { args.plots.iter().map(|f| f.parse()).collect::<Result<_, _>>()? };
    let counter = Arc::new(AtomicUsize::new(0));
    let phase = Arc::new(std::sync::atomic::AtomicU8::new(0));
    let exec = lapse::parallel::Exec { chunk_rows: args.chunk_rows, progress: Some(counter.clone()) };
    let opts = lapse::pipeline::RunOptions { input: args.input.clone(), output: args.output.clone(), exec, plots, force: args.force, phase: Some(phase.clone()) };
    let progress = (!quiet).then(|| lapse::commands::progress::Progress::start(lapse::pipeline::input_rows(&args.pipeline, args.input.as_deref()).unwrap_or(0), counter, phase));
    Ok((opts, progress))
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
pub fn tune_allocator() {
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
pub fn tune_allocator() {}

/// An error and its causes on one line, each cause once: lapse's errors
/// already name their cause in their message, so a cause whose text the
/// message holds is not repeated.
pub fn render_error(e: &anyhow::Error) -> String {
    let mut msg = e.to_string();
    for cause in e.chain().skip(1) {
        let c = cause.to_string();
        if !msg.contains(&c) {
            msg.push_str(": ");
            msg.push_str(&c);
        }
    }
    msg
}

/// Panics inside guarded readers of outside files (and polars' own worker
/// threads) are turned into errors by the library: keep them off the
/// terminal. Any other panic is a bug and is reported as usual.
pub fn quiet_guarded_panics() {
    let default_hook = std::panic::take_hook();
    std::panic::set_hook(Box::new(move |info| {
        let polars_thread = std::thread::current().name().is_some_and(|n| n.starts_with("polars"));
        if !(lapse::io::in_guarded_reader() || polars_thread) {
            default_hook(info);
        }
    }));
}

/// Log lines on stderr: `run` reports progress at info level by default;
/// other commands only warn; `LAPSE_LOG` overrides.
pub fn init_logging(cli: &Cli) {
    use std::io::IsTerminal;
    let default_info = matches!(cli.command, Command::Run(_));
    let level = if cli.quiet {
        "error"
    } else {
        match (cli.verbose, default_info) {
            (0, false) => "warn",
            (0, true) | (1, _) => "info",
            _ => "debug",
        }
    };
    let filter = tracing_subscriber::EnvFilter::try_from_env("LAPSE_LOG").unwrap_or_else(|_| tracing_subscriber::EnvFilter::new(level));
    tracing_subscriber::fmt().with_env_filter(filter).with_writer(std::io::stderr).with_ansi(std::io::stderr().is_terminal()).init();
}
