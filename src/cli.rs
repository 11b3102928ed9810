//! Command-line front end: clap, then one call per command into [`crate::commands`]. Exit
//! codes: 0 success, 2 bad input, 1 internal failure. The binary (`src/main.rs`) and the
//! Python package's `python -m voxstrata` both call [`main_with_args`].

use std::ffi::OsString;
use std::path::PathBuf;

use crate as voxstrata;
use clap::{Args, Parser, Subcommand};
use voxstrata::analysis::abx::AbxOptions;
use voxstrata::analysis::compare::{CompareOptions, Estimator, Kernel, MatchBy};
use voxstrata::analysis::map::MapOptions;
use voxstrata::analysis::probe::ProbeOptions;
use voxstrata::capture::{LabelOptions, LayerSelection};
use voxstrata::commands;
use voxstrata::commands::report::sample::{SampleOptions, Size};
use voxstrata::{CommonOptions, Error, OpenOptions, Progress};

#[derive(Parser, Debug)]
#[command(
    name = "voxstrata",
    version,
    about = "What each layer of a speech model encodes: probes, maps, cluster purity and checkpoint comparison"
)]
struct Cli {
    #[command(subcommand)]
    command: Command,
    /// Seed for every random choice.
    #[arg(long, global = true, default_value_t = 0)]
    seed: u64,
    /// Worker threads (0: all cores); results do not depend on it.
    #[arg(long, global = true, default_value_t = 0)]
    threads: usize,
    /// Layers to analyse, by number: e.g. 0,4-8.
    #[arg(long, global = true)]
    layers: Option<LayerSelection>,
    /// No progress on stderr.
    #[arg(long, global = true)]
    quiet: bool,
}

#[derive(Args, Debug, Clone)]
struct CaptureArgs {
    /// Treat this label value as unlabelled (repeatable), e.g. --drop-label sil.
    #[arg(long = "drop-label", value_name = "LABEL")]
    drop_label: Vec<String>,
    /// Two-column TSV (from, to) merging label values before analysis.
    #[arg(long = "merge-labels", value_name = "FILE")]
    merge_labels: Option<PathBuf>,
    /// Drop frames holding NaN or Inf instead of stopping (needs a full scan).
    #[arg(long)]
    allow_nonfinite: bool,
}

#[derive(Args, Debug, Clone)]
struct ProbeArgs {
    /// Label task to probe (repeatable; default: phone, speaker and every continuous column).
    #[arg(long = "task", value_name = "COLUMN")]
    tasks: Vec<String>,
    /// Pooling of frames into items: frame, segment or utterance.
    #[arg(long = "pool", default_value = "frame")]
    pool: voxstrata::select::pool::Pooling,
    /// Frames stacked either side of each frame, within its utterance.
    #[arg(long, default_value_t = 0)]
    context: usize,
    /// Split: auto, speaker, utterance or frame.
    #[arg(long, default_value = "auto")]
    split: voxstrata::select::split::SplitKind,
    /// Grouped cross-validation folds: auto (5 folds when one split would test on fewer
    /// than 10 speakers, or utterances for the speaker task), or a number (1: one split).
    #[arg(long, default_value = "auto")]
    folds: voxstrata::select::split::FoldCount,
    /// Share of groups held out for testing (one split).
    #[arg(long = "test-fraction", default_value_t = 0.25)]
    test_fraction: f64,
    /// Largest number of training items per fit (stratified subsample; 0: all).
    #[arg(long = "max-train-frames", default_value_t = 20_000)]
    max_train_frames: usize,
    /// Largest number of test items per fold (stratified subsample; 0: all).
    #[arg(long = "max-test-frames", default_value_t = 50_000)]
    max_test_frames: usize,
    /// Bootstrap resamples for the 95% interval.
    #[arg(long, default_value_t = 1000)]
    bootstrap: usize,
    /// Skip the control task.
    #[arg(long = "no-control")]
    no_control: bool,
    /// Label column whose values are the control task's types (default: phone in context).
    #[arg(long = "control-by", value_name = "COLUMN")]
    control_by: Option<String>,
    /// Also compute the MDL online code length of every layer and task.
    #[arg(long)]
    mdl: bool,
    /// Stop instead of dropping classes or speakers the split cannot use.
    #[arg(long)]
    strict: bool,
    /// Output folder.
    #[arg(long, default_value = "voxstrata-probe")]
    out: PathBuf,
    /// Write into an output folder that already holds files.
    #[arg(long)]
    force: bool,
}

#[derive(Args, Debug, Clone)]
struct CompareArgs {
    /// Output folder.
    #[arg(long, default_value = "voxstrata-compare")]
    out: PathBuf,
    /// Write into an output folder that already holds files.
    #[arg(long)]
    force: bool,
    /// Pair frames row by row, or by utterance and frame index when the orders differ.
    #[arg(long = "match-by", value_enum, default_value = "row")]
    match_by: MatchByArg,
    /// Use at most this many paired frames (seeded sample).
    #[arg(long = "max-frames", value_name = "N")]
    max_frames: Option<usize>,
    /// CKA kernel (rbf uses a subsample, 2000 frames unless --max-frames says otherwise).
    #[arg(long, value_enum, default_value = "linear")]
    kernel: KernelArg,
    /// HSIC estimator: full, or unbiased minibatch estimates for very many frames.
    #[arg(long, value_enum, default_value = "full")]
    hsic: HsicArg,
    /// Frames per minibatch for --hsic minibatch.
    #[arg(long = "batch-size", default_value_t = 512)]
    batch_size: usize,
    /// Label task for probe deltas (repeatable; default: phone, speaker and every continuous
    /// column).
    #[arg(long = "task", value_name = "COLUMN")]
    tasks: Vec<String>,
    /// Skip the probe deltas (CKA only).
    #[arg(long = "no-probe")]
    no_probe: bool,
    /// Bootstrap resamples for the probe-delta intervals.
    #[arg(long, default_value_t = 1000)]
    bootstrap: usize,
}

#[derive(clap::ValueEnum, Debug, Clone, Copy)]
enum MatchByArg {
    Row,
    Utterance,
}

#[derive(clap::ValueEnum, Debug, Clone, Copy)]
enum KernelArg {
    Linear,
    Rbf,
}

#[derive(clap::ValueEnum, Debug, Clone, Copy)]
enum HsicArg {
    Full,
    Minibatch,
}

#[derive(Subcommand, Debug)]
enum Command {
    /// Summarise a capture: layers, frames, speakers, label tasks, warnings.
    Inspect {
        /// Capture folder.
        capture: PathBuf,
        /// Print JSON instead of text.
        #[arg(long)]
        json: bool,
        #[command(flatten)]
        cap: CaptureArgs,
    },
    /// Linear probes per layer and label task.
    Probe {
        /// Capture folder.
        capture: PathBuf,
        #[command(flatten)]
        cap: CaptureArgs,
        #[command(flatten)]
        probe: ProbeArgs,
    },
    /// 2-D maps (t-SNE or PCA) and cluster purity per layer.
    Map(MapCmd),
    /// Compare two captures of the same frames layer by layer.
    Compare {
        /// First capture.
        capture_a: PathBuf,
        /// Second capture.
        capture_b: PathBuf,
        #[command(flatten)]
        cap: CaptureArgs,
        #[command(flatten)]
        args: CompareArgs,
    },
    /// Phone ABX error per layer, within and across speaker.
    Abx(AbxCmd),
    /// Run everything and write one HTML report.
    Report(ReportCmd),
    /// Plan the work of `report` as units for a Slurm job array, with the assembly after it.
    Batch(BatchCmd),
    /// Run one unit of a batch plan (one array task).
    Unit {
        /// The plan (DIR/batch/plan.json).
        plan: PathBuf,
        /// The unit's index ($SLURM_ARRAY_TASK_ID).
        #[arg(long)]
        index: usize,
    },
    /// Merge the parts of a batch run into the files `report` writes.
    Assemble {
        /// The report folder given to `batch --out`.
        dir: PathBuf,
    },
    /// Build the demo scenario and write its two captures.
    Demo {
        /// Output folder.
        #[arg(long)]
        out: PathBuf,
        /// Write into an output folder that already holds files.
        #[arg(long)]
        force: bool,
        /// Scenario size: the shipped demo, or a small one for quick checks.
        #[arg(long, value_enum, default_value = "default")]
        size: DemoSizeArg,
    },
}

#[derive(Args, Debug)]
struct MapCmd {
    /// Capture folder.
    capture: PathBuf,
    /// Map method.
    #[arg(long, value_enum, default_value = "tsne")]
    method: MapMethod,
    /// Frames drawn per speaker × phone cell (all of a cell's frames when it has fewer).
    #[arg(long = "per-label", default_value_t = 10)]
    per_label: usize,
    /// Also colour the maps by this label (repeatable); speaker and phone are always drawn.
    #[arg(long = "color-by", value_name = "LABEL")]
    color_by: Vec<String>,
    /// Output folder.
    #[arg(long, default_value = "voxstrata-map")]
    out: PathBuf,
    /// Write into an output folder that already holds files.
    #[arg(long)]
    force: bool,
    #[command(flatten)]
    cap: CaptureArgs,
}

#[derive(Args, Debug)]
struct AbxCmd {
    /// Capture folder.
    capture: PathBuf,
    /// Label column whose runs are the items.
    #[arg(long, default_value = "phone")]
    label: String,
    /// Most items per (label, context, speaker) cell, drawn with the seed (0: all).
    #[arg(long = "max-items", default_value_t = 5)]
    max_items: usize,
    /// Output folder.
    #[arg(long, default_value = "voxstrata-abx")]
    out: PathBuf,
    /// Write into an output folder that already holds files.
    #[arg(long)]
    force: bool,
    #[command(flatten)]
    cap: CaptureArgs,
}

#[derive(Args, Debug)]
struct ReportCmd {
    /// One or two captures (none: the shipped demo).
    captures: Vec<PathBuf>,
    /// Output folder (index.html, run.json and every analysis's records and figures).
    #[arg(long, default_value = "voxstrata-report")]
    out: PathBuf,
    /// Write into an output folder that already holds files.
    #[arg(long)]
    force: bool,
    /// Layer map method (pca is much faster on big captures).
    #[arg(long = "map-method", value_enum, default_value = "tsne")]
    map_method: MapMethod,
    /// Skip the ABX analysis.
    #[arg(long = "no-abx")]
    no_abx: bool,
    /// Also compute the probes' MDL online code and draw its compression on the page.
    #[arg(long)]
    mdl: bool,
    /// Training frames per probe fit: a number (0: all) or auto (20000 on layers up to 128
    /// wide, scaled by 128/width on wider ones, at least 2000; said on the page)
    #[arg(long = "probe-frames", default_value = "auto")]
    probe_frames: Size,
    /// Points per layer map: a number or auto (10000 on layers up to 128 wide, scaled by
    /// 128/width on wider ones, at least 1000; said on the page)
    #[arg(long = "map-points", default_value = "auto")]
    map_points: Size,
    #[command(flatten)]
    cap: CaptureArgs,
}

#[derive(Args, Debug)]
struct BatchCmd {
    #[command(flatten)]
    report: ReportCmd,
    /// Slurm partition of every job.
    #[arg(long)]
    partition: Option<String>,
    /// Time limit of each job, HH:MM:SS.
    #[arg(long)]
    time: Option<String>,
    /// Memory of each job, e.g. 8G.
    #[arg(long)]
    mem: Option<String>,
    /// CPUs of each job (also the unit's worker threads).
    #[arg(long)]
    cpus: Option<usize>,
    /// Submit both scripts with sbatch (otherwise print the commands).
    #[arg(long)]
    submit: bool,
}

impl BatchCmd {
    fn args(self) -> Result<commands::batch::BatchArgs, Error> {
        let r = self.report;
        let merge = match &r.cap.merge_labels {
            Some(p) => voxstrata::capture::labels::read_merge_map(p)?,
            None => Default::default(),
        };
        let mut merge_labels: Vec<(String, String)> = merge.into_iter().collect();
        merge_labels.sort();
        Ok(commands::batch::BatchArgs {
            captures: r.captures,
            out: r.out,
            force: r.force,
            settings: commands::batch::Settings {
                drop_label: r.cap.drop_label,
                merge_labels,
                allow_nonfinite: r.cap.allow_nonfinite,
                map_method: match r.map_method {
                    MapMethod::Tsne => "tsne".into(),
                    MapMethod::Pca => "pca".into(),
                },
                abx: !r.no_abx,
                mdl: r.mdl,
                probe_frames: r.probe_frames,
                map_points: r.map_points,
            },
            slurm: commands::batch::Slurm {
                partition: self.partition,
                time: self.time,
                mem: self.mem,
                cpus: self.cpus,
            },
            submit: self.submit,
        })
    }
}

/// Size of the demo scenario.
#[derive(clap::ValueEnum, Clone, Copy, Debug)]
enum DemoSizeArg {
    /// 32 talkers, over 20 000 captured frames.
    Default,
    /// A few talkers and utterances (seconds).
    Small,
}

/// Map method on the command line.
#[derive(clap::ValueEnum, Clone, Copy, Debug)]
enum MapMethod {
    Tsne,
    Pca,
}

fn open_options(c: &CaptureArgs) -> Result<OpenOptions, Error> {
    let mut labels = LabelOptions {
        drop: c.drop_label.clone(),
        ..Default::default()
    };
    if let Some(p) = &c.merge_labels {
        labels.merge = voxstrata::capture::labels::read_merge_map(p)?;
    }
    Ok(OpenOptions {
        labels,
        allow_nonfinite: c.allow_nonfinite,
    })
}

fn map_method(m: MapMethod) -> voxstrata::analysis::map::Method {
    match m {
        MapMethod::Tsne => voxstrata::analysis::map::Method::Tsne,
        MapMethod::Pca => voxstrata::analysis::map::Method::Pca,
    }
}

fn probe_options(p: &ProbeArgs) -> ProbeOptions {
    ProbeOptions {
        tasks: p.tasks.clone(),
        pooling: p.pool,
        context: p.context,
        split: p.split,
        test_fraction: p.test_fraction,
        folds: p.folds,
        max_train_frames: p.max_train_frames,
        max_test_frames: p.max_test_frames,
        bootstrap: p.bootstrap,
        control: !p.no_control,
        control_by: p.control_by.clone(),
        mdl: p.mdl,
        strict: p.strict,
        ..Default::default()
    }
}

fn compare_options(args: &CompareArgs) -> CompareOptions {
    CompareOptions {
        match_by: match args.match_by {
            MatchByArg::Row => MatchBy::Row,
            MatchByArg::Utterance => MatchBy::Utterance,
        },
        max_frames: args.max_frames,
        kernel: match args.kernel {
            KernelArg::Linear => Kernel::Linear,
            KernelArg::Rbf => Kernel::Rbf,
        },
        estimator: match args.hsic {
            HsicArg::Full => Estimator::Full,
            HsicArg::Minibatch => Estimator::Minibatch,
        },
        batch_size: args.batch_size,
        probe: !args.no_probe,
        tasks: args.tasks.clone(),
        bootstrap: args.bootstrap,
        ..Default::default()
    }
}

impl MapCmd {
    fn args(self) -> Result<commands::map::MapArgs, Error> {
        Ok(commands::map::MapArgs {
            open: open_options(&self.cap)?,
            capture: self.capture,
            map: MapOptions {
                method: map_method(self.method),
                per_label: self.per_label,
                color_by: self.color_by,
                ..Default::default()
            },
            out: self.out,
            force: self.force,
        })
    }
}

impl AbxCmd {
    fn args(self) -> Result<commands::abx::AbxArgs, Error> {
        Ok(commands::abx::AbxArgs {
            open: open_options(&self.cap)?,
            capture: self.capture,
            abx: AbxOptions {
                label: self.label,
                max_items: self.max_items,
            },
            out: self.out,
            force: self.force,
        })
    }
}

impl ReportCmd {
    fn options(self) -> Result<commands::report::ReportOptions, Error> {
        Ok(commands::report::ReportOptions {
            open: open_options(&self.cap)?,
            captures: self.captures,
            out: self.out,
            force: self.force,
            map: MapOptions {
                method: map_method(self.map_method),
                ..Default::default()
            },
            abx: (!self.no_abx).then(AbxOptions::default),
            probe: ProbeOptions {
                mdl: self.mdl,
                ..Default::default()
            },
            sample: SampleOptions {
                probe_frames: self.probe_frames,
                map_points: self.map_points,
            },
            ..Default::default()
        })
    }
}

fn run(cli: Cli) -> Result<(), Error> {
    voxstrata::with_threads(cli.threads, move || dispatch(cli))?
}

fn dispatch(cli: Cli) -> Result<(), Error> {
    let common = CommonOptions {
        seed: cli.seed,
        threads: cli.threads,
        layers: cli.layers.clone(),
    };
    let progress = Progress::new(cli.quiet);
    let (c, p) = (&common, &progress);
    match cli.command {
        Command::Inspect { capture, json, cap } => {
            let args = commands::inspect::InspectArgs {
                capture,
                open: open_options(&cap)?,
                json,
            };
            commands::inspect::run(&args, p)
        }
        Command::Probe {
            capture,
            cap,
            probe,
        } => {
            let args = commands::probe::ProbeArgs {
                capture,
                open: open_options(&cap)?,
                probe: probe_options(&probe),
                out: probe.out,
                force: probe.force,
            };
            commands::probe::run(&args, c, p)
        }
        Command::Map(m) => commands::map::run(&m.args()?, c, p),
        Command::Compare {
            capture_a,
            capture_b,
            cap,
            args,
        } => {
            let run_args = commands::compare::CompareArgs {
                capture_a,
                capture_b,
                open: open_options(&cap)?,
                compare: compare_options(&args),
                out: args.out,
                force: args.force,
            };
            commands::compare::run(&run_args, c, p)
        }
        Command::Abx(a) => commands::abx::run(&a.args()?, c, p),
        Command::Report(r) => report(&r.options()?, c, p, cli.quiet),
        Command::Batch(b) => commands::batch::run(&b.args()?, c),
        Command::Unit { plan, index } => commands::batch::unit(&plan, index, p),
        Command::Assemble { dir } => commands::batch::assemble(&dir, p),
        Command::Demo { out, force, size } => {
            let size = match size {
                DemoSizeArg::Default => voxstrata::demo::DemoSize::Default,
                DemoSizeArg::Small => voxstrata::demo::DemoSize::Small,
            };
            let args = commands::demo::DemoArgs {
                out,
                force,
                seed: c.seed,
                size,
            };
            commands::demo::run(&args, p)
        }
    }
}

fn report(
    opts: &commands::report::ReportOptions,
    common: &CommonOptions,
    progress: &Progress,
    quiet: bool,
) -> Result<(), Error> {
    let rec = commands::report::run(opts, common, progress)?;
    if !quiet {
        let total = rec.timings.last().map(|t| t.seconds).unwrap_or(0.0);
        eprintln!(
            "voxstrata: report written to {} ({total:.1} s)",
            opts.out.join("index.html").display()
        );
    }
    Ok(())
}

/// Run the command line `args` (the program name first) and return the exit code: 0
/// success, 2 bad input (a usage error included), 1 internal failure. Errors are printed on
/// stderr as `voxstrata: <message>`; help and version go to stdout with code 0.
pub fn main_with_args<I, T>(args: I) -> i32
where
    I: IntoIterator<Item = T>,
    T: Into<OsString> + Clone,
{
    let cli = match Cli::try_parse_from(args) {
        Ok(cli) => cli,
        Err(e) => {
            let _ = e.print();
            return e.exit_code();
        }
    };
    let code = match run(cli) {
        Ok(()) => 0,
        Err(e) => {
            eprintln!("voxstrata: {e}");
            e.exit_code()
        }
    };
    report_peak_rss();
    code
}

/// With `VOXSTRATA_REPORT_PEAK_RSS=1`, print the process's peak resident set (`VmHWM` from
/// /proc/self/status, Linux only) on stderr, so tests can check memory use of a whole run.
fn report_peak_rss() {
    if std::env::var_os("VOXSTRATA_REPORT_PEAK_RSS").is_none() {
        return;
    }
    if let Ok(status) = std::fs::read_to_string("/proc/self/status") {
        if let Some(line) = status.lines().find(|l| l.starts_with("VmHWM:")) {
            eprintln!("voxstrata: peak RSS {}", line["VmHWM:".len()..].trim());
        }
    }
}
