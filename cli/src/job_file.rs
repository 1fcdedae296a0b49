//! Job files (`flexure run JOB.toml`): a whole project's commands written down once. Each step
//! is a table named after a command (`[[curvature]]`, `[[window_study]]`, `[[sector_times]]`,
//! `[[anisotropy]]`, `[[stages]]`, `[[plan]]`, `[[render]]`, `[[grid]]`) whose keys are that
//! command's options with `_` for `-` (`min_snr = 3.0` is `--min-snr 3.0`), its positional
//! inputs by name (`input`, `sectors`, `volumes`), lists as TOML arrays and switches as
//! booleans. Each step is turned into its command line and parsed by the command's own parser,
//! so every option a command has is a key, with the same defaults and checks; an unknown key is
//! refused naming the key and its line.
//!
//! Paths: inputs relative to the job file's folder; `out` and `png` relative to the run's output
//! folder (top-level `output`, relative to the job file's folder, or `flexure run -o DIR`);
//! `{output}/...` names a file an earlier step wrote. Steps run in a fixed order (grid,
//! curvature, window_study, sector_times, anisotropy, stages, plan, render), so a step can use
//! any earlier kind's outputs.

use clap::{ArgAction, ArgMatches, CommandFactory};
use flexure_engine::error::FlexureError;
use flexure_engine::jobs::Named as NamedValue;
use std::any::TypeId;
use std::ffi::OsString;
use std::path::{Path, PathBuf};
use toml::de::{DeTable, DeValue};
use toml::Spanned;

/// Step kinds in the order they run (job-file spelling).
pub const STEP_ORDER: [&str; 8] = [
    "grid",
    "curvature",
    "window_study",
    "sector_times",
    "anisotropy",
    "stages",
    "plan",
    "render",
];

/// The prefix naming the run's output folder in input paths.
pub const OUTPUT_PREFIX: &str = "{output}";

/// Options that take a path or a keyword (a number, `quality`, `mean`): resolved as paths only
/// when they look like one.
const PATH_OR_KEYWORD: [(&str, &str); 2] =
    [("anisotropy", "weights"), ("sector_times", "reference")];

/// Options naming outputs, relative to the run's output folder.
const OUTPUT_KEYS: [&str; 2] = ["out", "png"];

/// A job file read and checked: its steps as command lines.
#[derive(Debug)]
pub struct JobFile {
    /// The job file.
    pub path: PathBuf,
    /// The run's output folder.
    pub output: PathBuf,
    /// Title of the run (the report's heading); default the job file's name.
    pub title: String,
    /// The steps in running order.
    pub steps: Vec<Step>,
}

/// One step: its command line and what it reads.
#[derive(Debug)]
pub struct Step {
    /// Step kind in job-file spelling (e.g. `window_study`).
    pub kind: &'static str,
    /// Line of the step's table in the job file.
    pub line: usize,
    /// The command line (`flexure window-study ...`), paths resolved.
    pub argv: Vec<OsString>,
    /// Input paths the step names (resolved; outputs of earlier steps included).
    pub inputs: Vec<PathBuf>,
    /// Output paths the step names (`out`, `png`), resolved.
    pub outputs: Vec<PathBuf>,
    /// The command line as its command's parser read it (defaults filled).
    pub matches: ArgMatches,
}

impl Step {
    /// `kind (line N)`, for messages.
    pub fn label(&self) -> String {
        format!("{} (line {})", self.kind, self.line)
    }
}

/// Reads the job file at `path`; `output` overrides the file's output folder.
pub fn read_job(path: &Path, output: Option<&Path>) -> Result<JobFile, FlexureError> {
    let text = std::fs::read_to_string(path).map_err(|e| {
        FlexureError::input(
            path,
            format!("cannot read the job file ({e}): check its name"),
        )
    })?;
    let at = |span: std::ops::Range<usize>, what: String| {
        let line = text[..span.start.min(text.len())].matches('\n').count() + 1;
        FlexureError::input(path, format!("line {line}: {what}"))
    };
    let table = DeTable::parse(&text).map_err(|e| {
        let what = format!("not valid TOML: {}", e.message());
        match e.span() {
            Some(span) => at(span, what),
            None => FlexureError::input(path, what),
        }
    })?;
    let folder = path
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    let folder = &std::path::absolute(folder).unwrap_or_else(|_| folder.to_path_buf());
    let mut declared_output = None;
    let mut title = None;
    let mut tables: Vec<(&'static str, Spanned<&DeTable>)> = Vec::new();
    for (key, value) in table.get_ref() {
        let name = key.get_ref().as_ref();
        match (name, value.get_ref()) {
            ("output", DeValue::String(s)) => declared_output = Some(folder.join(s.as_ref())),
            ("title", DeValue::String(s)) => title = Some(s.to_string()),
            ("output" | "title", _) => {
                return Err(at(value.span(), format!("`{name}` takes a string")))
            }
            _ => {
                let Some(kind) = STEP_ORDER.iter().find(|k| **k == name) else {
                    return Err(at(
                        key.span(),
                        format!(
                            "unknown key `{name}`; a job file holds `output`, `title` and steps [[{}]]",
                            STEP_ORDER.join("]], [[")
                        ),
                    ));
                };
                match value.get_ref() {
                    DeValue::Table(t) => tables.push((kind, Spanned::new(value.span(), t))),
                    DeValue::Array(items) => {
                        for item in items.iter() {
                            match item.get_ref() {
                                DeValue::Table(t) => {
                                    tables.push((kind, Spanned::new(item.span(), t)))
                                }
                                _ => {
                                    return Err(at(
                                        item.span(),
                                        format!("a [[{kind}]] step must be a table of options"),
                                    ))
                                }
                            }
                        }
                    }
                    _ => {
                        return Err(at(
                            value.span(),
                            format!("a [[{kind}]] step must be a table of options"),
                        ))
                    }
                }
            }
        }
    }
    let output = match (output, declared_output) {
        (Some(o), _) => std::path::absolute(o).unwrap_or_else(|_| o.to_path_buf()),
        (None, Some(o)) => o,
        (None, None) => {
            return Err(FlexureError::input(
                path,
                "no output folder: add `output = \"FOLDER\"` at the top or give -o DIR",
            ))
        }
    };
    let context = Resolve {
        folder,
        output: &output,
    };
    let mut steps = tables
        .into_iter()
        .map(|(kind, table)| {
            let line = text[..table.span().start].matches('\n').count() + 1;
            step(kind, line, table.get_ref(), &context).map_err(|(span, what)| match span {
                Some(span) => at(span, format!("[[{kind}]]: {what}")),
                None => FlexureError::input(path, format!("line {line}: [[{kind}]]: {what}")),
            })
        })
        .collect::<Result<Vec<_>, _>>()?;
    steps.sort_by_key(|s| STEP_ORDER.iter().position(|k| *k == s.kind));
    if steps.is_empty() {
        return Err(FlexureError::input(path, "the job has no steps"));
    }
    let title = title.unwrap_or_else(|| {
        path.file_stem()
            .map(|s| s.to_string_lossy().to_string())
            .unwrap_or_default()
    });
    Ok(JobFile {
        path: path.to_path_buf(),
        output,
        title,
        steps,
    })
}

/// Where relative paths point.
struct Resolve<'a> {
    folder: &'a Path,
    output: &'a Path,
}

impl Resolve<'_> {
    /// An input path: `{output}/...` in the output folder, else relative to the job file.
    fn input(&self, value: &str) -> Result<PathBuf, String> {
        no_backslash(value)?;
        Ok(match value.strip_prefix(OUTPUT_PREFIX) {
            Some(rest) => self.output.join(rest.trim_start_matches('/')),
            None => self.folder.join(value),
        })
    }

    /// An output path, relative to the output folder and inside it.
    fn output(&self, value: &str) -> Result<PathBuf, String> {
        no_backslash(value)?;
        let relative = match value.strip_prefix(OUTPUT_PREFIX) {
            Some(rest) => Path::new(rest.trim_start_matches('/')),
            None => Path::new(value),
        };
        let leaves = relative.is_absolute()
            || relative
                .components()
                .any(|c| matches!(c, std::path::Component::ParentDir));
        if leaves {
            return Err(format!(
                "'{value}' leaves the run's output folder: outputs are relative to it (give -o or `output` to move the run)"
            ));
        }
        Ok(self.output.join(relative))
    }
}

/// Job-file paths use `/` on every system; a backslash is refused (it would be part of a file
/// name here).
fn no_backslash(value: &str) -> Result<(), String> {
    if value.contains('\\') {
        Err(format!(
            "'{value}' holds a backslash: write paths in job files with / (as on every system)"
        ))
    } else {
        Ok(())
    }
}

type StepError = (Option<std::ops::Range<usize>>, String);

/// The command line of one step.
fn step(
    kind: &'static str,
    line: usize,
    table: &DeTable,
    context: &Resolve,
) -> Result<Step, StepError> {
    let command_name = kind.replace('_', "-");
    let command = crate::Cli::command();
    let command = command
        .find_subcommand(&command_name)
        .ok_or((None, format!("no command {command_name}")))?;
    let mut argv: Vec<OsString> = vec!["flexure".into(), command_name.clone().into()];
    let mut positional: Vec<OsString> = Vec::new();
    let mut inputs = Vec::new();
    let mut outputs = Vec::new();
    for (key, value) in table {
        let id = key.get_ref().as_ref();
        let arg = command
            .get_arguments()
            .find(|a| a.get_id() == id && !["quiet", "help", "version"].contains(&id))
            .ok_or_else(|| {
                let keys: Vec<&str> = command
                    .get_arguments()
                    .map(|a| a.get_id().as_str())
                    .filter(|k| !["quiet", "help", "version"].contains(k))
                    .collect();
                (
                    Some(key.span()),
                    format!("unknown key `{id}`; keys are {}", keys.join(", ")),
                )
            })?;
        let values =
            scalars(value).map_err(|what| (Some(value.span()), format!("`{id}`: {what}")))?;
        let switch = matches!(arg.get_action(), ArgAction::SetTrue);
        if switch {
            match value.get_ref() {
                DeValue::Boolean(true) => argv.push(format!("--{}", long(arg)).into()),
                DeValue::Boolean(false) => {}
                _ => return Err((Some(value.span()), format!("`{id}` is true or false"))),
            }
            continue;
        }
        let role = path_role(kind, arg);
        let values = join_tuples(arg, values);
        let mut resolved = Vec::new();
        for v in values {
            let (text, named) = resolve(&v, role, context)
                .map_err(|what| (Some(value.span()), format!("`{id}`: {what}")))?;
            match named {
                Named::Input(p) => inputs.push(p),
                Named::Output(p) => outputs.push(p),
                Named::Nothing => {}
            }
            resolved.push(text);
        }
        let values = resolved;
        if arg.is_positional() {
            positional.extend(values.into_iter().map(OsString::from));
        } else if let Some(delimiter) = arg.get_value_delimiter() {
            let joined = values.join(&delimiter.to_string());
            argv.push(format!("--{}={joined}", long(arg)).into());
        } else {
            argv.extend(values.iter().map(|v| format!("--{}={v}", long(arg)).into()));
        }
    }
    if !positional.is_empty() {
        argv.push("--".into());
        argv.extend(positional);
    }
    let matches = crate::Cli::command()
        .try_get_matches_from(&argv)
        .map_err(|e| (None, in_job_terms(&crate::usage_message(&e), &command_name)))?;
    Ok(Step {
        kind,
        line,
        argv,
        inputs,
        outputs,
        matches,
    })
}

/// An array given to an option that takes one value per occurrence and whose value is a tuple
/// (`pad = [x, y]`, `wellhead = [x, y]`) is that one value, comma-joined; other arrays are one
/// value per element.
fn join_tuples(arg: &clap::Arg, values: Vec<String>) -> Vec<String> {
    let tuple_types = [
        TypeId::of::<(f64, f64)>(),
        TypeId::of::<NamedValue<(f64, f64)>>(),
        TypeId::of::<NamedValue<(f64, f64, f64)>>(),
    ];
    let numbers = values.iter().all(|v| v.trim().parse::<f64>().is_ok());
    if values.len() > 1
        && numbers
        && tuple_types
            .iter()
            .any(|t| arg.get_value_parser().type_id() == *t)
    {
        vec![values.join(",")]
    } else {
        values
    }
}

/// A command-line usage message in job-file terms: `--min-snr <MIN_SNR>` becomes `min_snr`,
/// and the help pointer names the command whose options the step's keys are.
fn in_job_terms(message: &str, command: &str) -> String {
    let message = message.trim_end_matches(" (see flexure --help)");
    let words: Vec<String> = message
        .split(' ')
        .filter(|w| !(w.starts_with('<') && w.ends_with('>')))
        .map(|w| match w.strip_prefix("--") {
            Some(name) => {
                let (name, rest) = name.split_at(
                    name.find(|c: char| !(c.is_ascii_alphanumeric() || c == '-'))
                        .unwrap_or(name.len()),
                );
                format!("`{}`{rest}", name.replace('-', "_"))
            }
            None => w.replace("'--", "'"),
        })
        .collect();
    format!(
        "{} (keys are the options of `flexure {command} --help`)",
        words.join(" ")
    )
}

/// The long option name of `arg`.
fn long(arg: &clap::Arg) -> String {
    arg.get_long()
        .map(str::to_string)
        .unwrap_or_else(|| arg.get_id().as_str().replace('_', "-"))
}

/// What a value of an option is, for path resolution.
#[derive(Clone, Copy, PartialEq)]
enum PathRole {
    /// Not a path.
    None,
    /// An input path.
    Input,
    /// An input path after `NAME=` (or bare).
    NamedInput,
    /// An input path unless it is a number or a word without `.` or `/`.
    InputOrKeyword,
    /// An output path.
    Output,
}

fn path_role(kind: &str, arg: &clap::Arg) -> PathRole {
    let id = arg.get_id().as_str();
    let value_type = arg.get_value_parser().type_id();
    if OUTPUT_KEYS.contains(&id) {
        PathRole::Output
    } else if PATH_OR_KEYWORD.contains(&(kind, id)) {
        PathRole::InputOrKeyword
    } else if value_type == TypeId::of::<PathBuf>() {
        PathRole::Input
    } else if value_type == TypeId::of::<NamedValue<PathBuf>>() {
        PathRole::NamedInput
    } else {
        PathRole::None
    }
}

/// The value with its path resolved for `role`, and the input or output path it names.
fn resolve(value: &str, role: PathRole, context: &Resolve) -> Result<(String, Named), String> {
    let input = |v: &str| context.input(v);
    Ok(match role {
        PathRole::None => (value.to_string(), Named::Nothing),
        PathRole::Output => {
            let p = context.output(value)?;
            (p.display().to_string(), Named::Output(p))
        }
        PathRole::Input => {
            let p = input(value)?;
            (p.display().to_string(), Named::Input(p))
        }
        PathRole::NamedInput => match value.split_once('=') {
            Some((name, file)) => {
                let p = input(file)?;
                (format!("{name}={}", p.display()), Named::Input(p))
            }
            None => {
                let p = input(value)?;
                (p.display().to_string(), Named::Input(p))
            }
        },
        PathRole::InputOrKeyword => {
            let keyword = value.trim().parse::<f64>().is_ok() || !value.contains(['.', '/', '\\']);
            if keyword {
                (value.to_string(), Named::Nothing)
            } else {
                let p = input(value)?;
                (p.display().to_string(), Named::Input(p))
            }
        }
    })
}

/// What a resolved value names.
enum Named {
    Nothing,
    Input(PathBuf),
    Output(PathBuf),
}

/// A value as the command line's text: scalars as written, arrays element by element, and an
/// inline table `{ NAME = VALUE }` as `NAME=VALUE` entries (for per-well options).
fn scalars(value: &Spanned<DeValue>) -> Result<Vec<String>, String> {
    match value.get_ref() {
        DeValue::Array(items) => items
            .iter()
            .map(|item| scalar(item.get_ref()))
            .collect::<Result<_, _>>(),
        DeValue::Table(entries) => entries
            .iter()
            .map(|(k, v)| {
                let values = scalars(v)?;
                Ok(format!("{}={}", k.get_ref(), values.join(",")))
            })
            .collect::<Result<_, _>>(),
        other => Ok(vec![scalar(other)?]),
    }
}

fn scalar(value: &DeValue) -> Result<String, String> {
    match value {
        DeValue::String(s) => Ok(s.to_string()),
        DeValue::Integer(i) => Ok(i.as_str().replace('_', "")),
        DeValue::Float(f) => Ok(f.as_str().replace('_', "")),
        DeValue::Boolean(b) => Ok(b.to_string()),
        DeValue::Datetime(_) => Err("dates are not options".into()),
        DeValue::Array(_) | DeValue::Table(_) => {
            Err("takes a value or a list of values, not nested lists or tables".into())
        }
    }
}
