//! `wahbad study`: a Monte-Carlo study of the solvers; a summary table on
//! stdout, the full table as JSON / CSV and a chart as SVG when asked.

use std::path::{Path, PathBuf};

use anyhow::Context as _;
use indicatif::{ProgressBar, ProgressStyle};
use wahbad::study::{self, report, svg, OutlierMode, StudyConfig, StudyMethod};
use wahbad::SolveParams;

use super::{bad_input, Failure};

/// How outliers are made (command-line form of [`OutlierMode`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum OutlierModeArg {
    /// Outlier directions drawn uniformly at random.
    Random,
    /// Outliers consistent with one wrong attitude, as a biased sensor gives.
    Structured,
}

/// Flags of `wahbad study`.
#[derive(Debug, clap::Args)]
#[command(after_help = "\
Each trial: a random attitude, random reference directions, inliers b = A r deflected by \
isotropic tangent-plane noise, outliers at random positions. crb = sqrt(trace P) of the true \
inliers; a trial succeeds when the attitude error is below 5 crb; a failed solve counts as an \
error of π. The row `ls-inliers` is least squares on the true inliers only: the efficiency \
yardstick. Figures other than median_time_us are identical for a given seed whatever --threads.")]
pub struct StudyArgs {
    /// Pair counts per trial, comma-separated.
    #[arg(long = "n", value_delimiter = ',', default_value = "50,200")]
    pub sizes: Vec<usize>,
    /// Outlier shares in [0, 1), comma-separated.
    #[arg(long, value_delimiter = ',', default_value = "0,0.5,0.7,0.8,0.9,0.95")]
    pub outliers: Vec<f64>,
    /// Trials per (n, outlier share) cell; all methods see the same trials.
    #[arg(long, default_value_t = 200)]
    pub trials: usize,
    /// 1-σ noise of every pair, degrees.
    #[arg(long, default_value_t = 0.01)]
    pub sigma_deg: f64,
    /// Methods, comma-separated; `ls-inliers` (least squares on the true
    /// inliers, the efficiency yardstick) is always added.
    #[arg(
        long,
        value_delimiter = ',',
        default_value = "ls,lud,gnc-tls,consensus,auto"
    )]
    pub methods: Vec<StudyMethod>,
    /// Master seed; results do not depend on the thread count.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
    /// How outliers are made.
    #[arg(long, value_enum, default_value_t = OutlierModeArg::Random)]
    pub outlier_mode: OutlierModeArg,
    /// Worker threads (default: all cores).
    #[arg(long)]
    pub threads: Option<usize>,
    /// Write the table as JSON here.
    #[arg(long)]
    pub json: Option<PathBuf>,
    /// Write the table as CSV here.
    #[arg(long)]
    pub csv: Option<PathBuf>,
    /// Write the chart as SVG here.
    #[arg(long)]
    pub svg: Option<PathBuf>,
}

/// Runs `wahbad study`.
pub fn run(args: &StudyArgs) -> Result<(), Failure> {
    let config = config_of(args)?;
    let threads = match args.threads {
        Some(0) => return Err(bad_input("--threads: must be at least 1")),
        Some(t) => t,
        None => std::thread::available_parallelism().map_or(1, |n| n.get()),
    };
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .context("starting the worker threads")
        .map_err(Failure::Failed)?;

    // Cells left out for too few inliers still count in the bar's total; the
    // bar is hidden when stderr is not a terminal.
    let total = (config.sizes.len() * config.outlier_shares.len() * config.trials) as u64;
    let bar = ProgressBar::new(total);
    bar.set_style(
        ProgressStyle::with_template("{elapsed_precise} [{bar:40}] {pos}/{len} trials, eta {eta}")
            .unwrap_or_else(|_| ProgressStyle::default_bar())
            .progress_chars("=> "),
    );
    let on_trial_done = || bar.inc(1);
    let result = pool.install(|| study::run(&config, &on_trial_done));
    bar.finish_and_clear();
    let report = result.map_err(|e| Failure::BadInput(e.into()))?;

    for cell in &report.skipped {
        eprintln!(
            "wahbad: note: skipped n = {} at outlier share {}: {} true inlier(s) leave no Cramér–Rao bound",
            cell.n, cell.outlier_share, cell.n_inliers
        );
    }
    print!("{}", report::to_text(&report.rows));

    if let Some(path) = &args.json {
        let json = report::to_json(&report.rows)
            .context("encoding JSON")
            .map_err(Failure::Failed)?;
        write(path, &json)?;
    }
    if let Some(path) = &args.csv {
        write(path, &report::to_csv(&report.rows))?;
    }
    if let Some(path) = &args.svg {
        let subtitle = format!(
            "σ = {}° per pair · {} outliers · {} trials per point · seed {}",
            args.sigma_deg,
            config.outlier_mode.as_str(),
            config.trials,
            config.seed
        );
        write(
            path,
            &svg::render(
                &report.rows,
                "wahbad study: contamination vs accuracy",
                &subtitle,
            ),
        )?;
    }
    Ok(())
}

fn config_of(args: &StudyArgs) -> Result<StudyConfig, Failure> {
    if !(args.sigma_deg.is_finite() && args.sigma_deg > 0.0 && args.sigma_deg < 180.0) {
        return Err(bad_input(format!(
            "--sigma-deg: {} is not in (0, 180)",
            args.sigma_deg
        )));
    }
    let mut methods = Vec::new();
    for m in &args.methods {
        if !methods.contains(m) {
            methods.push(*m);
        }
    }
    if !methods.contains(&StudyMethod::LsInliers) {
        methods.push(StudyMethod::LsInliers);
    }
    Ok(StudyConfig {
        sizes: args.sizes.clone(),
        outlier_shares: args.outliers.clone(),
        trials: args.trials,
        sigma: args.sigma_deg.to_radians(),
        methods,
        seed: args.seed,
        outlier_mode: match args.outlier_mode {
            OutlierModeArg::Random => OutlierMode::Random,
            OutlierModeArg::Structured => OutlierMode::Structured,
        },
        params: SolveParams::default(),
    })
}

fn write(path: &Path, text: &str) -> Result<(), Failure> {
    std::fs::write(path, text)
        .with_context(|| format!("writing {}", path.display()))
        .map_err(Failure::Failed)
}
