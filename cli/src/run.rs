//! `flexure run JOB.toml`: reads the job file ([`crate::job_file`]), checks every step before
//! anything runs, runs the steps as one all-or-nothing transaction
//! ([`flexure_engine::io::RunTransaction`]) and writes `report.html` and `manifest.json` last.

use crate::job_file::{read_job, JobFile, Step, OUTPUT_PREFIX};
use crate::{execute, Cli, Command, Outcome, RunArgs, CAUTION};
use clap::{ArgMatches, CommandFactory, FromArgMatches};
use flexure_engine::error::FlexureError;
use flexure_engine::io::RunTransaction;
use flexure_engine::jobs::{
    write_run_files, FileRecord, Progress, RunRecord, StepRecord, HTI_CAUTION, REPORT_FILE,
    WELL_CAUTION,
};
use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::time::Instant;

/// Runs (or with `--check` only checks) the job file of `args`.
pub fn run_job(args: &RunArgs, progress: &dyn Progress) -> Result<Outcome, FlexureError> {
    let job = read_job(&args.job, args.out.as_deref())?;
    let parsed = job
        .steps
        .iter()
        .map(|step| parse(&job, step).and_then(|cli| check_step(step, &cli, &job).map(|()| cli)))
        .collect::<Result<Vec<_>, _>>()?;
    check_links(&job)?;
    if args.check {
        return Ok(check_summary(&job));
    }
    let transaction = RunTransaction::begin()?;
    let started = Instant::now();
    let mut steps = Vec::new();
    let mut cautions: Vec<&str> = Vec::new();
    for (step, cli) in job.steps.iter().zip(parsed) {
        let t0 = Instant::now();
        let before = transaction.outputs().len();
        let outcome = execute(cli.command, progress).map_err(|e| in_step(&job, step, e))?;
        let mut summary = outcome.text;
        for caution in [HTI_CAUTION, WELL_CAUTION] {
            if summary.contains(caution) {
                summary = summary
                    .replace(&format!("{caution}\n"), "")
                    .replace(caution, "");
                if !cautions.contains(&caution) {
                    cautions.push(caution);
                }
            }
        }
        steps.push(StepRecord {
            step: step.kind.to_string(),
            line: step.line,
            options: options(&step.matches),
            seconds: t0.elapsed().as_secs_f64(),
            summary,
            notes: outcome.notes,
            outputs: transaction.outputs()[before..]
                .iter()
                .map(|p| shown_output(p, &job.output))
                .collect(),
        });
    }
    cautions.push(CAUTION);
    let mut record = RunRecord {
        flexure_version: format!("flexure {}", env!("CARGO_PKG_VERSION")),
        command: flexure_engine::provenance::command_line(),
        title: job.title.clone(),
        job_file: FileRecord::of(&job.path, absolute(&job.path), None)?,
        output_folder: absolute(&job.output),
        inputs: inputs(&job, &transaction.outputs())?,
        outputs: steps
            .iter()
            .flat_map(|s| s.outputs.iter().map(move |o| (s.label(), o)))
            .map(|(label, o)| FileRecord::of(&job.output.join(o), o.clone(), Some(label)))
            .collect::<Result<_, _>>()?,
        warnings: steps
            .iter()
            .flat_map(|s| s.notes.iter().map(move |n| format!("{}: {n}", s.label())))
            .collect(),
        cautions: cautions.iter().map(|c| c.to_string()).collect(),
        total_seconds: started.elapsed().as_secs_f64(),
        steps,
    };
    write_run_files(&mut record, &job.output)?;
    transaction.finish();
    Ok(Outcome {
        text: run_summary(&record, &job),
        notes: Vec::new(),
        caution: false,
    })
}

/// The step's command, from the options the job file reader parsed.
fn parse(job: &JobFile, step: &Step) -> Result<Cli, FlexureError> {
    Cli::from_arg_matches(&step.matches)
        .map_err(|e| in_step(job, step, FlexureError::Parameter(crate::usage_message(&e))))
}

/// Checks a step before anything runs: its options build the engine's job, and every input
/// that is not an earlier step's output exists.
fn check_step(step: &Step, cli: &Cli, job: &JobFile) -> Result<(), FlexureError> {
    let built = match &cli.command {
        Command::Curvature(a) => a.job().map(drop),
        Command::Anisotropy(a) => a.job().map(drop),
        Command::Render(a) => a.job().map(drop),
        Command::WindowStudy(a) => a.job().map(drop),
        Command::Stages(a) => a.job().map(drop),
        _ => Ok(()),
    };
    built.map_err(|e| in_step(job, step, e))?;
    for input in &step.inputs {
        if !input.starts_with(&job.output) && !input.exists() {
            return Err(in_step(
                job,
                step,
                FlexureError::input(
                    input,
                    format!(
                        "not found (inputs are relative to the job file's folder; `{OUTPUT_PREFIX}/...` names an earlier step's output)"
                    ),
                ),
            ));
        }
    }
    Ok(())
}

fn in_step(job: &JobFile, step: &Step, e: FlexureError) -> FlexureError {
    FlexureError::Parameter(format!(
        "{}: step {}: {e}",
        job.path.display(),
        step.label()
    ))
}

/// Checks how the steps connect before anything runs: every `{output}/...` input lies in what
/// an earlier step writes (its output folder or file), and no two steps name the same output
/// file (render and grid outputs are files; other steps' outputs are folders they share).
fn check_links(job: &JobFile) -> Result<(), FlexureError> {
    let mut files: Vec<(&Path, &Step)> = Vec::new();
    for (k, step) in job.steps.iter().enumerate() {
        for input in step.inputs.iter().filter(|p| p.starts_with(&job.output)) {
            let written = job.steps[..k]
                .iter()
                .any(|earlier| earlier.outputs.iter().any(|o| input.starts_with(o)));
            if !written {
                return Err(in_step(
                    job,
                    step,
                    FlexureError::input(
                        input,
                        "no earlier step writes this: check the {output}/... path and the step that should write it (steps run grid, curvature, window_study, sector_times, anisotropy, stages, plan, render)",
                    ),
                ));
            }
        }
        if matches!(step.kind, "render" | "grid") {
            for output in &step.outputs {
                if let Some((_, first)) = files.iter().find(|(p, _)| *p == output.as_path()) {
                    return Err(in_step(
                        job,
                        step,
                        FlexureError::input(
                            output,
                            format!(
                                "step {} writes this file too: give the steps different output names",
                                first.label()
                            ),
                        ),
                    ));
                }
                files.push((output, step));
            }
        }
    }
    Ok(())
}

/// Every option of the step, defaults filled (null where the command decides automatically),
/// typed (a list where the option takes several).
fn options(matches: &ArgMatches) -> BTreeMap<String, serde_json::Value> {
    let Some((name, sub)) = matches.subcommand() else {
        return BTreeMap::new();
    };
    let command = Cli::command();
    let Some(command) = command.find_subcommand(name) else {
        return BTreeMap::new();
    };
    command
        .get_arguments()
        .map(|a| a.get_id().as_str())
        .filter(|id| !["help", "version", "quiet"].contains(id))
        .map(|id| {
            let values: Vec<serde_json::Value> = sub
                .get_raw(id)
                .map(|raw| raw.map(|v| typed(&v.to_string_lossy())).collect())
                .unwrap_or_default();
            let value = match values.len() {
                0 => serde_json::Value::Null,
                1 => values[0].clone(),
                _ => serde_json::Value::Array(values),
            };
            (id.to_string(), value)
        })
        .collect()
}

/// A command-line value as JSON: true/false as booleans, numbers as numbers, else text.
fn typed(text: &str) -> serde_json::Value {
    match text {
        "true" => serde_json::Value::Bool(true),
        "false" => serde_json::Value::Bool(false),
        _ => text
            .parse::<i64>()
            .map(serde_json::Value::from)
            .or_else(|_| text.parse::<f64>().map(serde_json::Value::from))
            .ok()
            .filter(|v| !v.is_null())
            .unwrap_or_else(|| serde_json::Value::String(text.to_string())),
    }
}

/// Input files the steps name, each once, this run's outputs left out; folders are listed by
/// their files.
fn inputs(job: &JobFile, outputs: &[PathBuf]) -> Result<Vec<FileRecord>, FlexureError> {
    let mut files: Vec<PathBuf> = Vec::new();
    for input in job.steps.iter().flat_map(|s| &s.inputs) {
        if input.is_dir() {
            let mut inner: Vec<PathBuf> = std::fs::read_dir(input)
                .map_err(|e| FlexureError::read(input, e))?
                .filter_map(|e| e.ok().map(|e| e.path()))
                .filter(|p| p.is_file())
                .collect();
            inner.sort();
            files.extend(inner);
        } else {
            files.push(input.clone());
        }
    }
    // Files this run wrote are outputs; anything else read, even from the output folder (a
    // previous run's file), is an input.
    files.retain(|f| !outputs.contains(f));
    let mut seen = std::collections::HashSet::new();
    files
        .into_iter()
        .filter(|f| seen.insert(absolute(f)))
        .map(|f| FileRecord::of(&f, absolute(&f), None))
        .collect()
}

/// `path` relative to the output folder (as the manifest lists outputs).
fn shown_output(path: &Path, output: &Path) -> String {
    path.strip_prefix(output)
        .unwrap_or(path)
        .to_string_lossy()
        .replace('\\', "/")
}

/// The absolute form of `path` (as given when it cannot be resolved).
fn absolute(path: &Path) -> String {
    std::path::absolute(path)
        .unwrap_or_else(|_| path.to_path_buf())
        .display()
        .to_string()
}

/// What `--check` prints: each step and its command line.
fn check_summary(job: &JobFile) -> Outcome {
    let mut text = format!(
        "job {} is valid: {} step{}, outputs to {}\n",
        job.path.display(),
        job.steps.len(),
        if job.steps.len() == 1 { "" } else { "s" },
        job.output.display()
    );
    for step in &job.steps {
        let line: Vec<String> = step
            .argv
            .iter()
            .map(|a| a.to_string_lossy().to_string())
            .collect();
        let _ = writeln!(text, "  {}: {}", step.label(), line.join(" "));
    }
    Outcome {
        text,
        notes: Vec::new(),
        caution: false,
    }
}

/// The run's summary: each step's summary under its label, a table of steps with their time
/// and files, the cautions once, and where the report and manifest are.
fn run_summary(record: &RunRecord, job: &JobFile) -> String {
    let mut text = String::new();
    for step in &record.steps {
        let _ = write!(text, "== {} ==\n{}", step.label(), step.summary);
        if !text.ends_with('\n') {
            text.push('\n');
        }
    }
    let _ = writeln!(text, "\n{:<26} {:>8} {:>7}", "step", "time (s)", "files");
    for step in &record.steps {
        let _ = writeln!(
            text,
            "{:<26} {:>8.1} {:>7}",
            step.label(),
            step.seconds,
            step.outputs.len()
        );
    }
    let _ = writeln!(
        text,
        "{:<26} {:>8.1} {:>7}\n",
        "run",
        record.total_seconds,
        record.outputs.len()
    );
    for caution in &record.cautions {
        let _ = writeln!(text, "{caution}");
    }
    let _ = writeln!(
        text,
        "Report: {}; manifest: {}",
        job.output.join(REPORT_FILE).display(),
        job.output
            .join(flexure_engine::jobs::MANIFEST_FILE)
            .display()
    );
    text
}
