//! `voxstrata batch`, `voxstrata unit` and `voxstrata assemble`: the work of a report split
//! into units ([`super::report::units`]) that run as the tasks of a Slurm job array, and
//! their parts assembled into the files `report` writes.
//!
//! `batch` checks and opens the captures as `report` does, then writes `DIR/batch/`:
//! `plan.json` (everything a unit needs), `units.sh` (the job array, one task per unit) and
//! `assemble.sh` (run after every task succeeded). Each unit writes
//! `DIR/batch/parts/unit-NNNN.json` atomically, or `unit-NNNN.failed` with its error.
//! `assemble` refuses a folder whose plan or parts do not fit, names missing or failed units,
//! and otherwise writes the report through the same assembly as `report`.

use std::path::{Path, PathBuf};
use std::time::Instant;

use serde::{Deserialize, Serialize};

mod scripts;

use scripts::{assemble_script, check_script_path, shell_quote, units_script, write_script};

use super::report::units::{self, Part, Unit};
use super::report::{self, Clock, Done, ReportOptions};
use crate::analysis::abx::AbxOptions;
use crate::analysis::map::{MapOptions, Method};
use crate::capture::{LabelOptions, LayerSelection, OpenOptions};
use crate::commands::report::sample::{SampleChoice, SampleOptions, Size};
use crate::write;
use crate::{CommonOptions, Progress};

/// Errors of `batch`, `unit` and `assemble`.
#[derive(Debug, thiserror::Error)]
pub enum BatchError {
    /// A Slurm option that sbatch would refuse.
    #[error("{option}: expected {expected}, found '{found}'")]
    Option {
        /// The option.
        option: &'static str,
        /// What it takes.
        expected: &'static str,
        /// What was given.
        found: String,
    },
    /// `--submit` without `sbatch` on the PATH.
    #[error("--submit: sbatch was not found on the PATH; the scripts were written to {dir}; submit them by hand where Slurm is installed:\n{commands}")]
    NoSbatch {
        /// The batch folder.
        dir: PathBuf,
        /// The commands to run.
        commands: String,
    },
    /// sbatch refused a script.
    #[error("sbatch {script}: exit status {status}: {stderr}")]
    Sbatch {
        /// The script.
        script: PathBuf,
        /// Its exit status.
        status: String,
        /// What it said.
        stderr: String,
    },
    /// Not a batch folder, or a plan this version cannot read.
    #[error("{path}: expected {expected}, found {found}")]
    NotBatch {
        /// The file or folder.
        path: PathBuf,
        /// What was expected.
        expected: String,
        /// What was found.
        found: String,
    },
    /// A part that another plan made.
    #[error("{path}: this part does not belong to the plan: {field} is {found}, the plan's is {expected}")]
    PartMismatch {
        /// The part file.
        path: PathBuf,
        /// The field that differs.
        field: &'static str,
        /// The plan's value.
        expected: String,
        /// The part's value.
        found: String,
    },
    /// A unit index outside the plan.
    #[error("--index: expected a unit of the plan (0 to {last}), found {found}")]
    Index {
        /// The last index.
        last: usize,
        /// The index given.
        found: usize,
    },
    /// Units without a part.
    #[error("{dir}: {n} of {total} units have no part:\n{list}\nrerun each with `voxstrata unit {plan} --index I`, then `voxstrata assemble {dir}`")]
    Incomplete {
        /// The report folder.
        dir: PathBuf,
        /// The plan.
        plan: PathBuf,
        /// Units without a part.
        n: usize,
        /// Units in the plan.
        total: usize,
        /// One line per unit.
        list: String,
    },
    /// Reading or running something failed inside (exit code 1).
    #[error("{0}")]
    Internal(String),
}

impl BatchError {
    /// Whether the user can fix this (exit code 2) rather than an internal failure (1).
    pub fn is_input(&self) -> bool {
        !matches!(self, BatchError::Internal(_))
    }
}

/// The report settings a plan carries: what `voxstrata report` takes on its command line.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Settings {
    /// Label values treated as unlabelled.
    pub drop_label: Vec<String>,
    /// Label merges (from, to), sorted.
    pub merge_labels: Vec<(String, String)>,
    /// Drop frames holding NaN or Inf.
    pub allow_nonfinite: bool,
    /// Map method: `tsne` or `pca`.
    pub map_method: String,
    /// Run ABX.
    pub abx: bool,
    /// Compute the probes' MDL online code.
    #[serde(default)]
    pub mdl: bool,
    /// Training frames per probe fit (`auto`: from the layers' width).
    #[serde(default)]
    pub probe_frames: Size,
    /// Points per layer map (`auto`: from the layers' width).
    #[serde(default)]
    pub map_points: Size,
}

impl Settings {
    /// The report's options for these settings.
    pub fn report_options(&self, captures: Vec<PathBuf>, out: PathBuf) -> ReportOptions {
        let method = if self.map_method == "pca" {
            Method::Pca
        } else {
            Method::Tsne
        };
        ReportOptions {
            captures,
            out,
            force: false,
            open: OpenOptions {
                labels: LabelOptions {
                    drop: self.drop_label.clone(),
                    merge: self.merge_labels.iter().cloned().collect(),
                    ..Default::default()
                },
                allow_nonfinite: self.allow_nonfinite,
            },
            map: MapOptions {
                method,
                ..Default::default()
            },
            abx: self.abx.then(AbxOptions::default),
            probe: crate::analysis::probe::ProbeOptions {
                mdl: self.mdl,
                ..Default::default()
            },
            sample: SampleOptions {
                probe_frames: self.probe_frames,
                map_points: self.map_points,
            },
            ..Default::default()
        }
    }
}

/// Resources asked of Slurm for each task.
#[derive(Clone, Debug, Default)]
pub struct Slurm {
    /// Partition.
    pub partition: Option<String>,
    /// Time limit, HH:MM:SS.
    pub time: Option<String>,
    /// Memory, e.g. 4G.
    pub mem: Option<String>,
    /// CPUs per task.
    pub cpus: Option<usize>,
}

impl Slurm {
    /// Refuse values sbatch would refuse, before anything is written.
    pub fn check(&self) -> Result<(), BatchError> {
        let bad = |option, expected, found: &str| {
            Err(BatchError::Option {
                option,
                expected,
                found: found.to_string(),
            })
        };
        if let Some(p) = &self.partition {
            if p.is_empty()
                || !p
                    .chars()
                    .all(|c| c.is_ascii_alphanumeric() || "-_.".contains(c))
            {
                return bad(
                    "--partition",
                    "a partition name (letters, digits, - _ .)",
                    p,
                );
            }
        }
        if let Some(t) = &self.time {
            let f: Vec<&str> = t.split(':').collect();
            let ok = f.len() == 3
                && f.iter()
                    .all(|x| !x.is_empty() && x.chars().all(|c| c.is_ascii_digit()))
                && f[1].len() == 2
                && f[2].len() == 2
                && f[1] < "60"
                && f[2] < "60";
            if !ok {
                return bad("--time", "a time limit HH:MM:SS", t);
            }
        }
        if let Some(m) = &self.mem {
            let digits = m.trim_end_matches(['K', 'M', 'G', 'T']);
            let ok = !digits.is_empty()
                && digits.chars().all(|c| c.is_ascii_digit())
                && m.len() - digits.len() <= 1
                && digits.parse::<u64>().is_ok_and(|v| v > 0);
            if !ok {
                return bad("--mem", "a memory size such as 4000M or 8G", m);
            }
        }
        if self.cpus == Some(0) {
            return bad("--cpus", "1 or more CPUs per task", "0");
        }
        Ok(())
    }

    fn directives(&self) -> String {
        let mut s = String::new();
        if let Some(p) = &self.partition {
            s += &format!("#SBATCH --partition={p}\n");
        }
        if let Some(t) = &self.time {
            s += &format!("#SBATCH --time={t}\n");
        }
        if let Some(m) = &self.mem {
            s += &format!("#SBATCH --mem={m}\n");
        }
        if let Some(c) = self.cpus {
            s += &format!("#SBATCH --cpus-per-task={c}\n");
        }
        s
    }
}

/// Everything a unit and the assembly need, as `DIR/batch/plan.json`.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct Plan {
    /// Always `voxstrata`.
    pub tool: String,
    /// The version that planned it (units and assembly refuse another).
    pub version: String,
    /// The run's seed.
    pub seed: u64,
    /// Worker threads per unit (0: all cores the task has).
    pub threads: usize,
    /// Layer numbers selected (None: all).
    pub layers: Option<Vec<usize>>,
    /// The folder paths are relative to (the folder `batch` ran in).
    pub workdir: PathBuf,
    /// Capture folders, as given.
    pub captures: Vec<PathBuf>,
    /// Capture names.
    pub names: Vec<String>,
    /// The report folder, as given.
    pub out: PathBuf,
    /// Report settings.
    pub settings: Settings,
    /// The sample chosen with every capture open (a unit opens only its own capture, so it
    /// could not choose the same one itself when the captures differ in width).
    pub sample: SampleChoice,
    /// The units; a unit's index is its array task id.
    pub units: Vec<Unit>,
}

impl Plan {
    fn common(&self) -> CommonOptions {
        CommonOptions {
            seed: self.seed,
            threads: self.threads,
            layers: self.layers.clone().map(LayerSelection),
        }
    }

    fn options(&self) -> ReportOptions {
        self.settings
            .report_options(self.captures.clone(), self.out.clone())
    }

    /// The options, checked, with the plan's sample set in.
    fn sized_options(&self) -> crate::Result<ReportOptions> {
        let mut opts = report::resolve(&self.options())?;
        report::use_sample(&mut opts, self.sample.clone());
        Ok(opts)
    }

    fn describe(&self, i: usize) -> String {
        format!("unit {i} ({})", self.units[i].describe(&self.names))
    }
}

/// One unit's part file: the plan's identity beside the part, so assembly can tell a part of
/// another plan.
#[derive(Debug, Serialize, Deserialize)]
struct PartFile {
    tool: String,
    version: String,
    seed: u64,
    captures: Vec<PathBuf>,
    index: usize,
    unit: Unit,
    seconds: f64,
    part: Part,
}

/// What `voxstrata batch` takes.
#[derive(Clone, Debug)]
pub struct BatchArgs {
    /// Captures (none: the shipped demo).
    pub captures: Vec<PathBuf>,
    /// Report folder.
    pub out: PathBuf,
    /// Write into a folder that already holds files.
    pub force: bool,
    /// Report settings.
    pub settings: Settings,
    /// Slurm resources.
    pub slurm: Slurm,
    /// Call sbatch.
    pub submit: bool,
}

fn batch_dir(out: &Path) -> PathBuf {
    out.join("batch")
}

fn io_err(path: &Path, e: impl std::fmt::Display) -> BatchError {
    BatchError::Internal(format!("{}: {e}", path.display()))
}

/// `voxstrata batch`: check and open the captures as `report` does, write the plan and the
/// two scripts, and submit them or print how to.
pub fn run(args: &BatchArgs, common: &CommonOptions) -> crate::Result<()> {
    args.slurm.check()?;
    let opts = args
        .settings
        .report_options(args.captures.clone(), args.out.clone());
    let mut opts = report::resolve(&opts)?;
    write::check_out_dir(&opts.out, args.force)?;
    let caps = report::open_all(&opts, common)?;
    let sample = report::choose_sample(&opts, &caps, common);
    report::use_sample(&mut opts, sample.clone());
    let units = units::plan(&caps, &opts, common)?;
    let workdir = std::env::current_dir().map_err(|e| io_err(Path::new("."), e))?;
    check_script_path(&workdir.join(batch_dir(&opts.out)))?;
    let plan = Plan {
        tool: "voxstrata".into(),
        version: env!("CARGO_PKG_VERSION").into(),
        seed: common.seed,
        threads: common.threads,
        layers: common.layers.as_ref().map(|l| l.0.clone()),
        workdir: workdir.clone(),
        captures: opts.captures.clone(),
        names: caps.iter().map(|c| c.name.clone()).collect(),
        out: opts.out.clone(),
        settings: args.settings.clone(),
        sample,
        units,
    };
    write::prepare_out_dir(&opts.out, args.force)?;
    let dir = workdir.join(batch_dir(&opts.out));
    // Parts of an earlier plan in this folder must not be taken for this plan's.
    let old_parts = dir.join("parts");
    if old_parts.exists() {
        std::fs::remove_dir_all(&old_parts).map_err(|e| io_err(&old_parts, e))?;
    }
    for sub in ["parts", "logs"] {
        let p = dir.join(sub);
        std::fs::create_dir_all(&p).map_err(|e| io_err(&p, e))?;
    }
    write::write_json(&dir.join("plan.json"), &plan)?;
    let exe = std::env::current_exe().map_err(|e| io_err(Path::new("voxstrata"), e))?;
    let (units_sh, assemble_sh) = (dir.join("units.sh"), dir.join("assemble.sh"));
    write_script(&units_sh, &units_script(&plan, &dir, &exe, &args.slurm))?;
    write_script(
        &assemble_sh,
        &assemble_script(&plan, &dir, &exe, &args.slurm),
    )?;
    println!(
        "planned {} units in {}",
        plan.units.len(),
        dir.join("plan.json").display()
    );
    let by_hand = format!(
        "  jobid=$(sbatch --parsable {})\n  sbatch --dependency=afterok:$jobid {}",
        shell_quote(&units_sh),
        shell_quote(&assemble_sh)
    );
    if !args.submit {
        println!("submit with:\n{by_hand}");
        return Ok(());
    }
    if !on_path("sbatch") {
        return Err(BatchError::NoSbatch {
            dir,
            commands: by_hand,
        }
        .into());
    }
    let array = sbatch(&units_sh, &[])?;
    let after = sbatch(&assemble_sh, &[format!("--dependency=afterok:{array}")])?;
    println!("submitted job array {array} ({} units)", plan.units.len());
    println!("submitted assembly job {after} (runs after every unit succeeded)");
    Ok(())
}

fn on_path(name: &str) -> bool {
    std::env::var_os("PATH")
        .map(|p| std::env::split_paths(&p).any(|d| d.join(name).is_file()))
        .unwrap_or(false)
}

/// Submit a script with `sbatch --parsable`; its job id.
fn sbatch(script: &Path, extra: &[String]) -> Result<String, BatchError> {
    let out = std::process::Command::new("sbatch")
        .arg("--parsable")
        .args(extra)
        .arg(script)
        .output()
        .map_err(|e| io_err(Path::new("sbatch"), e))?;
    let text = String::from_utf8_lossy(&out.stdout);
    let id = text.trim().split(';').next().unwrap_or("").to_string();
    if !out.status.success() || id.is_empty() || !id.chars().all(|c| c.is_ascii_digit()) {
        return Err(BatchError::Sbatch {
            script: script.to_path_buf(),
            status: out.status.to_string(),
            stderr: String::from_utf8_lossy(&out.stderr).trim().to_string(),
        });
    }
    Ok(id)
}

/// Read a plan; exit code 2 when it is missing, unreadable or from another version.
pub fn read_plan(path: &Path) -> Result<Plan, BatchError> {
    let not = |found: String| BatchError::NotBatch {
        path: path.to_path_buf(),
        expected: "the plan.json of a folder written by voxstrata batch".into(),
        found,
    };
    let bytes = std::fs::read(path).map_err(|e| not(format!("no readable file ({e})")))?;
    let plan: Plan = serde_json::from_slice(&bytes)
        .map_err(|e| not(format!("a file that is not a plan ({e})")))?;
    if plan.tool != "voxstrata" || plan.version != env!("CARGO_PKG_VERSION") {
        return Err(not(format!(
            "a plan of {} {} (this is voxstrata {})",
            plan.tool,
            plan.version,
            env!("CARGO_PKG_VERSION")
        )));
    }
    Ok(plan)
}

fn part_path(parts: &Path, i: usize) -> PathBuf {
    parts.join(format!("unit-{i:04}.json"))
}

fn failed_path(parts: &Path, i: usize) -> PathBuf {
    parts.join(format!("unit-{i:04}.failed"))
}

/// `voxstrata unit PLAN --index I`: run one unit and write its part (replacing any earlier
/// one); on failure write its error beside the parts and return it.
pub fn unit(plan_path: &Path, index: usize, progress: &Progress) -> crate::Result<()> {
    let plan_path = std::path::absolute(plan_path).map_err(|e| io_err(plan_path, e))?;
    let plan = read_plan(&plan_path)?;
    if index >= plan.units.len() {
        return Err(BatchError::Index {
            last: plan.units.len().saturating_sub(1),
            found: index,
        }
        .into());
    }
    let parts = plan_path.with_file_name("parts");
    std::env::set_current_dir(&plan.workdir).map_err(|e| io_err(&plan.workdir, e))?;
    let t = Instant::now();
    match run_unit(&plan, index, progress) {
        Ok(part) => {
            let file = PartFile {
                tool: plan.tool.clone(),
                version: plan.version.clone(),
                seed: plan.seed,
                captures: plan.captures.clone(),
                index,
                unit: plan.units[index].clone(),
                seconds: t.elapsed().as_secs_f64(),
                part,
            };
            let bytes = serde_json::to_vec(&file)
                .map_err(|e| BatchError::Internal(format!("encoding part: {e}")))?;
            write::write_atomic(&part_path(&parts, index), &bytes)?;
            let _ = std::fs::remove_file(failed_path(&parts, index));
            Ok(())
        }
        Err(e) => {
            let _ = std::fs::remove_file(part_path(&parts, index));
            write::write_atomic(&failed_path(&parts, index), format!("{e}\n").as_bytes())?;
            Err(e)
        }
    }
}

/// Run unit `index`, opening only the captures it reads (so a capture that cannot be read fails
/// its own units, not the other capture's).
fn run_unit(plan: &Plan, index: usize, progress: &Progress) -> crate::Result<Part> {
    let common = plan.common();
    let mut opts = plan.sized_options()?;
    let unit = match plan.units[index].clone() {
        Unit::Probe { capture, layer } => {
            opts.captures = vec![own(&opts.captures, capture)?];
            Unit::Probe { capture: 0, layer }
        }
        Unit::Abx { capture, layer } => {
            opts.captures = vec![own(&opts.captures, capture)?];
            Unit::Abx { capture: 0, layer }
        }
        Unit::Map { capture } => {
            opts.captures = vec![own(&opts.captures, capture)?];
            Unit::Map { capture: 0 }
        }
        u @ (Unit::CkaRow { .. } | Unit::Compare) => u,
    };
    let caps = report::open_all(&opts, &common)?;
    units::run(&unit, &caps, &opts, &common, progress)
}

fn own(captures: &[PathBuf], i: usize) -> Result<PathBuf, BatchError> {
    captures
        .get(i)
        .cloned()
        .ok_or_else(|| BatchError::Internal(format!("the plan names capture {i}")))
}

/// `voxstrata assemble DIR`: check the plan and every part, then write the report from them.
pub fn assemble(dir: &Path, progress: &Progress) -> crate::Result<()> {
    let t_all = Instant::now();
    let dir = std::path::absolute(dir).map_err(|e| io_err(dir, e))?;
    let plan_path = batch_dir(&dir).join("plan.json");
    let plan = read_plan(&plan_path)?;
    let planned = plan.workdir.join(&plan.out);
    if !same_folder(&planned, &dir) {
        return Err(BatchError::NotBatch {
            path: plan_path,
            expected: format!("a plan for {}", dir.display()),
            found: format!("a plan for {}", planned.display()),
        }
        .into());
    }
    let done = read_parts(&plan, &batch_dir(&dir).join("parts"), &dir, &plan_path)?;
    std::env::set_current_dir(&plan.workdir).map_err(|e| io_err(&plan.workdir, e))?;
    let common = plan.common();
    let opts = plan.sized_options()?;
    let mut clock = Clock::default();
    let t = Instant::now();
    let caps = report::open_all(&opts, &common)?;
    clock.done("open and validate", t);
    let outside = done.iter().map(|d| d.seconds).sum();
    report::assemble::write_all(
        &caps,
        done,
        &opts,
        &common,
        progress,
        clock,
        (t_all, outside),
    )?;
    println!("report written to {}", dir.join("index.html").display());
    Ok(())
}

fn same_folder(a: &Path, b: &Path) -> bool {
    match (a.canonicalize(), b.canonicalize()) {
        (Ok(x), Ok(y)) => x == y,
        _ => false,
    }
}

/// Every unit's part, checked against the plan; names the units without one.
fn read_parts(
    plan: &Plan,
    parts: &Path,
    dir: &Path,
    plan_path: &Path,
) -> Result<Vec<Done>, BatchError> {
    let mut done = Vec::new();
    let mut absent = Vec::new();
    for (i, unit) in plan.units.iter().enumerate() {
        let p = part_path(parts, i);
        let Ok(bytes) = std::fs::read(&p) else {
            let why = match std::fs::read_to_string(failed_path(parts, i)) {
                Ok(e) => format!("failed: {}", e.trim()),
                Err(_) => "missing (not run yet, still running, or killed)".to_string(),
            };
            absent.push(format!("  {}: {why}", plan.describe(i)));
            continue;
        };
        let f: PartFile = serde_json::from_slice(&bytes).map_err(|e| BatchError::NotBatch {
            path: p.clone(),
            expected: "a part written by voxstrata unit".into(),
            found: format!("a file that is not one ({e})"),
        })?;
        let mismatch = |field, expected: String, found: String| {
            Err(BatchError::PartMismatch {
                path: p.clone(),
                field,
                expected,
                found,
            })
        };
        if f.version != plan.version {
            return mismatch("version", plan.version.clone(), f.version);
        }
        if f.seed != plan.seed {
            return mismatch("seed", plan.seed.to_string(), f.seed.to_string());
        }
        if f.captures != plan.captures {
            return mismatch(
                "captures",
                format!("{:?}", plan.captures),
                format!("{:?}", f.captures),
            );
        }
        if f.index != i || f.unit != *unit {
            return mismatch(
                "unit",
                format!("{i}: {unit:?}"),
                format!("{}: {:?}", f.index, f.unit),
            );
        }
        done.push(Done {
            unit: f.unit,
            part: f.part,
            seconds: f.seconds,
        });
    }
    if !absent.is_empty() {
        return Err(BatchError::Incomplete {
            dir: dir.to_path_buf(),
            plan: plan_path.to_path_buf(),
            n: absent.len(),
            total: plan.units.len(),
            list: absent.join("\n"),
        });
    }
    Ok(done)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn slurm_options_sbatch_would_refuse_are_refused() {
        let ok = Slurm {
            partition: Some("debug".into()),
            time: Some("01:30:00".into()),
            mem: Some("8G".into()),
            cpus: Some(2),
        };
        assert!(ok.check().is_ok());
        for bad in [
            Slurm {
                time: Some("1:30".into()),
                ..Default::default()
            },
            Slurm {
                time: Some("01:75:00".into()),
                ..Default::default()
            },
            Slurm {
                mem: Some("8GB".into()),
                ..Default::default()
            },
            Slurm {
                mem: Some("0".into()),
                ..Default::default()
            },
            Slurm {
                cpus: Some(0),
                ..Default::default()
            },
            Slurm {
                partition: Some("a b".into()),
                ..Default::default()
            },
        ] {
            assert!(
                matches!(bad.check(), Err(BatchError::Option { .. })),
                "{bad:?}"
            );
        }
    }
}
