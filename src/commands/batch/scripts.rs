//! The two scripts `batch` writes: `units.sh` (the job array) and `assemble.sh`, with the
//! quoting each of their lines needs. `#SBATCH` lines are read by sbatch, not by a shell;
//! the command lines are read by `sh`.

use std::path::Path;

use super::{io_err, BatchError, Plan, Slurm};
use crate::write;

pub(super) fn write_script(path: &Path, text: &str) -> crate::Result<()> {
    write::write_atomic(path, text.as_bytes())?;
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        std::fs::set_permissions(path, std::fs::Permissions::from_mode(0o755))
            .map_err(|e| io_err(path, e))?;
    }
    Ok(())
}

/// A path in single quotes for a POSIX shell.
pub(super) fn shell_quote(p: &Path) -> String {
    format!("'{}'", p.display().to_string().replace('\'', r"'\''"))
}

/// A path as one argument of an `#SBATCH` line. sbatch splits these lines itself, not
/// through a shell: double quotes group characters (spaces included), a backslash takes the
/// next character as it is, and an unquoted `#` starts a comment; nothing is expanded. So the
/// path goes in double quotes with `\`, `"` and `#` escaped by a backslash.
fn sbatch_quote(s: &str) -> String {
    let mut q = String::with_capacity(s.len() + 2);
    q.push('"');
    for c in s.chars() {
        if matches!(c, '\\' | '"' | '#') {
            q.push('\\');
        }
        q.push(c);
    }
    q.push('"');
    q
}

/// `--output`'s file pattern for a log in `dir`: Slurm replaces `%` sequences in it (`%a` is
/// the array task id), so a `%` of the path itself is written `%%`.
fn output_pattern(dir: &Path, file: &str) -> String {
    sbatch_quote(&format!(
        "{}/{file}",
        dir.display().to_string().replace('%', "%%")
    ))
}

/// Refuse a folder the scripts cannot name: a line break ends an `#SBATCH` line, and a
/// backslash anywhere in `--output` makes Slurm take the pattern literally (every task would
/// write the same log).
pub(super) fn check_script_path(p: &Path) -> Result<(), BatchError> {
    let s = p.display().to_string();
    if s.contains(['\n', '\r', '\\']) {
        return Err(BatchError::Option {
            option: "--out (in the folder batch runs in)",
            expected: "a folder path without line breaks or backslashes (Slurm's #SBATCH lines and log patterns cannot hold them)",
            found: s,
        });
    }
    Ok(())
}

pub(super) fn units_script(plan: &Plan, dir: &Path, exe: &Path, slurm: &Slurm) -> String {
    let threads = slurm
        .cpus
        .map(|c| format!(" --threads {c}"))
        .unwrap_or_default();
    format!(
        "#!/bin/sh\n\
         # One task per unit of {plan_json}; written by voxstrata batch.\n\
         #SBATCH --job-name=voxstrata-units\n\
         #SBATCH --array=0-{last}\n\
         #SBATCH --chdir={workdir}\n\
         #SBATCH --output={logs}\n\
         {directives}\
         exec {exe} --quiet{threads} unit {plan_q} --index \"$SLURM_ARRAY_TASK_ID\"\n",
        plan_json = dir.join("plan.json").display(),
        last = plan.units.len().saturating_sub(1),
        workdir = sbatch_quote(&plan.workdir.display().to_string()),
        logs = output_pattern(&dir.join("logs"), "unit-%a.log"),
        directives = slurm.directives(),
        exe = shell_quote(exe),
        plan_q = shell_quote(&dir.join("plan.json")),
    )
}

pub(super) fn assemble_script(plan: &Plan, dir: &Path, exe: &Path, slurm: &Slurm) -> String {
    format!(
        "#!/bin/sh\n\
         # Assembles the report once every unit of {plan_json} succeeded; written by voxstrata batch.\n\
         #SBATCH --job-name=voxstrata-assemble\n\
         #SBATCH --chdir={workdir}\n\
         #SBATCH --output={logs}\n\
         {directives}\
         exec {exe} --quiet assemble {out}\n",
        plan_json = dir.join("plan.json").display(),
        workdir = sbatch_quote(&plan.workdir.display().to_string()),
        logs = output_pattern(&dir.join("logs"), "assemble.log"),
        directives = slurm.directives(),
        exe = shell_quote(exe),
        out = shell_quote(&plan.workdir.join(&plan.out)),
    )
}

#[cfg(test)]
mod tests {
    use super::super::{batch_dir, Settings};
    use super::*;
    use crate::commands::report::units::Unit;
    use std::path::PathBuf;

    fn plan_in(workdir: &Path) -> Plan {
        Plan {
            tool: "voxstrata".into(),
            version: env!("CARGO_PKG_VERSION").into(),
            seed: 1,
            threads: 0,
            layers: None,
            workdir: workdir.to_path_buf(),
            captures: vec![PathBuf::from("cap")],
            names: vec!["cap".into()],
            out: PathBuf::from("rep ort"),
            settings: Settings {
                drop_label: vec![],
                merge_labels: vec![],
                allow_nonfinite: false,
                map_method: "pca".into(),
                abx: false,
                mdl: false,
                probe_frames: Default::default(),
                map_points: Default::default(),
            },
            sample: crate::commands::report::sample::choose(&Default::default(), 48),
            units: vec![Unit::Map { capture: 0 }; 4],
        }
    }

    /// Every line of `script` that starts with `#SBATCH --NAME=`, the rest of the line.
    fn directive<'a>(script: &'a str, name: &str) -> &'a str {
        let head = format!("#SBATCH --{name}=");
        script
            .lines()
            .find_map(|l| l.strip_prefix(head.as_str()))
            .unwrap_or_else(|| panic!("no {head} in {script}"))
    }

    #[test]
    fn scripts_name_folders_with_spaces_and_shell_characters() {
        // A workdir, report folder and program path holding a space, quotes, `$`, `#`, `%`
        // and a glob character.
        let tmp = tempfile::tempdir().unwrap();
        let work = tmp.path().join("run #1 it's \"$HOME\" 50% *");
        std::fs::create_dir_all(&work).unwrap();
        let plan = plan_in(&work);
        let dir = work.join(batch_dir(&plan.out));
        check_script_path(&dir).unwrap();
        // A stand-in for voxstrata that prints its arguments one per line.
        let exe = work.join("vx bin's $x");
        std::fs::write(
            &exe,
            "#!/bin/sh\nfor a in \"$@\"; do printf '%s\\n' \"$a\"; done\n",
        )
        .unwrap();
        use std::os::unix::fs::PermissionsExt;
        std::fs::set_permissions(&exe, std::fs::Permissions::from_mode(0o755)).unwrap();
        let units = units_script(&plan, &dir, &exe, &Slurm::default());
        let assemble = assemble_script(&plan, &dir, &exe, &Slurm::default());
        let w = work.display().to_string();
        // sbatch reads #SBATCH lines itself: double quotes group, a backslash escapes `\`, `"`
        // and `#`, and `%` in --output is written `%%` (Slurm's sbatch documentation, "filename
        // pattern"; its script parser's argument splitting).
        let quoted = w.replace('"', "\\\"").replace('#', "\\#");
        assert_eq!(directive(&units, "chdir"), format!("\"{quoted}\""));
        assert_eq!(
            directive(&units, "output"),
            format!(
                "\"{}/rep ort/batch/logs/unit-%a.log\"",
                quoted.replace('%', "%%")
            )
        );
        assert_eq!(directive(&assemble, "chdir"), format!("\"{quoted}\""));
        assert_eq!(
            directive(&assemble, "output"),
            format!(
                "\"{}/rep ort/batch/logs/assemble.log\"",
                quoted.replace('%', "%%")
            )
        );
        // The shell lines: bash parses both scripts, and runs them with every path intact.
        for (name, text, args) in [
            (
                "units.sh",
                &units,
                vec![
                    "--quiet".to_string(),
                    "unit".into(),
                    dir.join("plan.json").display().to_string(),
                    "--index".into(),
                    "3".into(),
                ],
            ),
            (
                "assemble.sh",
                &assemble,
                vec![
                    "--quiet".to_string(),
                    "assemble".into(),
                    work.join("rep ort").display().to_string(),
                ],
            ),
        ] {
            let path = tmp.path().join(name);
            std::fs::write(&path, text).unwrap();
            let check = std::process::Command::new("bash")
                .arg("-n")
                .arg(&path)
                .output()
                .unwrap();
            assert!(check.status.success(), "bash -n {name}: {check:?}");
            let ran = std::process::Command::new("sh")
                .arg(&path)
                .env("SLURM_ARRAY_TASK_ID", "3")
                .output()
                .unwrap();
            assert!(ran.status.success(), "{name}: {ran:?}");
            let got: Vec<String> = String::from_utf8_lossy(&ran.stdout)
                .lines()
                .map(String::from)
                .collect();
            assert_eq!(got, args, "{name}");
        }
    }

    #[test]
    fn folders_the_scripts_cannot_name_are_refused() {
        for bad in ["/a\nb", "/a\\b", "/a\rb"] {
            assert!(check_script_path(Path::new(bad)).is_err(), "{bad:?}");
        }
        assert!(check_script_path(Path::new("/a b/#1 it's $x %y")).is_ok());
    }

    #[test]
    fn quoting_survives_a_quote() {
        assert_eq!(shell_quote(Path::new("/a b/it's")), r"'/a b/it'\''s'");
    }
}
