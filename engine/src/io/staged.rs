//! Staged outputs and the one commit of a job: every output is written complete under a hidden
//! temporary name beside its final path ([`StagedFile`]), and a job renames all of them into
//! place at the end, together, as one transaction ([`commit_all`]): its outputs appear
//! together or not at all.
//!
//! The transaction (common practice for atomic replacement on one file system; each step is a
//! POSIX `rename(2)`, which replaces its target atomically):
//! 1. refuse two outputs with the same target (file names compared ignoring case, as on some
//!    file systems), naming the file and both sources, before anything is renamed;
//! 2. move every existing target file aside to a hidden backup (`.NAME.backup-PID.EXT`);
//! 3. rename every staged file to its target;
//! 4. on success remove the backups; on any failure remove what step 3 renamed in, restore the
//!    backups and return the first error, so the folder is as it was.
//!
//! Folders created for outputs (the output folder itself, `roses/`, `wells/`, ...) are created
//! when the first file is staged in them and removed again, when empty, once no staged file in
//! them is left uncommitted: a failed job leaves no new folder behind. [`prepare_output_dir`]
//! checks early that a folder can be written, and leaves it as it found it.
//!
//! A [`RunTransaction`] widens the transaction to every job of a run (`flexure run`): each job
//! commits as above, but backups and new folders are kept until the run finishes, and a run
//! that fails anywhere undoes all its jobs' commits.
//!
//! Interrupted by a signal the command line handles (Ctrl-C, SIGTERM, SIGHUP), a job leaves no
//! temporary file: the handler calls [`discard_uncommitted`], which lets a commit under way
//! finish first, before the process exits. Interrupted hard (power loss, `kill -9`) between
//! steps 2 and 4, a folder may keep hidden
//! `.NAME.partial-PID.EXT` or `.NAME.backup-PID.EXT` files: the backups are the previous
//! versions of `NAME`.

use crate::error::{FlexureError, Result};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex, Weak};
use std::thread::ThreadId;

/// A complete output written under a temporary name beside its final path. [`commit`] (or
/// [`commit_all`] with the job's other outputs) renames it into place; dropped uncommitted (an
/// error elsewhere in the job), the temporary file and the folders made for it (when empty)
/// are removed, so a failed run leaves neither a partial nor a final file.
///
/// [`commit`]: StagedFile::commit
#[derive(Debug)]
pub struct StagedFile {
    pub(super) temp: PathBuf,
    target: PathBuf,
    source: Option<String>,
    /// Folders created for outputs that hold this file's target, deepest first.
    folders: Vec<Arc<CreatedFolder>>,
    committed: bool,
}

impl StagedFile {
    /// Reserves the temporary name of `target` (see [`temporary_path`]) and creates the
    /// target's missing folders (removed again if the file is never committed). A folder that
    /// cannot be created is reported by the write to [`StagedFile::temp`] that follows.
    pub fn new(target: &Path) -> Self {
        let temp = temporary_path(target);
        track_temporary(&temp);
        Self {
            temp,
            target: target.to_path_buf(),
            source: None,
            folders: hold_folders(parent_of(target)).unwrap_or_default(),
            committed: false,
        }
    }

    /// Names what this output is (e.g. "rose of well A stage 3"), for the message when two
    /// outputs of a job would have the same file name.
    pub fn with_source(mut self, source: impl Into<String>) -> Self {
        self.source = Some(source.into());
        self
    }

    /// The temporary path to write to.
    pub fn temp(&self) -> &Path {
        &self.temp
    }

    /// The final path.
    pub fn target(&self) -> &Path {
        &self.target
    }

    /// Renames the temporary file to its final name (a transaction of one file, see
    /// [`commit_all`]).
    pub fn commit(self) -> Result<()> {
        commit_all(vec![self])
    }
}

impl Drop for StagedFile {
    fn drop(&mut self) {
        if !self.committed {
            let _ = std::fs::remove_file(&self.temp);
        }
        untrack_temporary(&self.temp);
        remove_side_files(&self.temp);
        // `folders` drops after this: each folder is removed, when empty, by its last holder.
    }
}

/// Commits the staged outputs of one job together (see the module notes): refuses two outputs
/// with the same target before anything is renamed, moves existing targets aside, renames
/// every staged file into place, and on any failure puts everything back as it was before
/// returning the error. On success the backups are removed.
pub fn commit_all(files: Vec<StagedFile>) -> Result<()> {
    commit_with(files, &mut |from, to| std::fs::rename(from, to))
}

/// [`commit_all`] with the rename to use (tests inject failures through it).
fn commit_with(
    mut files: Vec<StagedFile>,
    rename: &mut dyn FnMut(&Path, &Path) -> std::io::Result<()>,
) -> Result<()> {
    // A signal handler's discard waits for a commit (or its rollback) to finish.
    let _committing = COMMIT.lock().unwrap_or_else(|e| e.into_inner());
    refuse_collisions(&files)?;
    refuse_earlier_outputs(&files)?;
    // (target, backup) of every existing target moved aside, and the targets renamed in.
    let mut backups: Vec<(PathBuf, PathBuf)> = Vec::new();
    let mut placed: Vec<PathBuf> = Vec::new();
    let mut step = || -> std::result::Result<(), (PathBuf, std::io::Error)> {
        for f in &files {
            // A folder in a target's place is left there: the rename below fails on it.
            let is_file = std::fs::symlink_metadata(&f.target).is_ok_and(|m| !m.is_dir());
            if is_file {
                let backup = backup_path(&f.target);
                rename(&f.target, &backup).map_err(|e| (f.target.clone(), e))?;
                backups.push((f.target.clone(), backup));
            }
        }
        for f in files.iter_mut() {
            rename(&f.temp, &f.target).map_err(|e| (f.target.clone(), e))?;
            f.committed = true;
            placed.push(f.target.clone());
        }
        Ok(())
    };
    let outcome = step();
    match outcome {
        Ok(()) => {
            let folders = files.iter().flat_map(|f| f.folders.iter().cloned());
            let mut runs = RUN.lock().unwrap_or_else(|e| e.into_inner());
            let this = std::thread::current().id();
            match runs
                .iter_mut()
                .find(|(t, _)| *t == this)
                .map(|(_, log)| log)
            {
                Some(log) => {
                    log.placed.extend(placed);
                    log.backups.extend(backups);
                    log.folders.extend(folders);
                }
                None => {
                    for (_, backup) in &backups {
                        let _ = std::fs::remove_file(backup);
                    }
                    for folder in folders {
                        folder.kept.store(true, Ordering::SeqCst);
                    }
                }
            }
            Ok(())
        }
        Err((path, e)) => {
            let mut unrestored = Vec::new();
            for target in placed.iter().rev() {
                if std::fs::remove_file(target).is_err() {
                    unrestored.push(format!("{} (remove it)", target.display()));
                }
            }
            for (target, backup) in backups.iter().rev() {
                if rename(backup, target).is_err() {
                    unrestored.push(format!(
                        "{} (its previous version is {})",
                        target.display(),
                        backup.display()
                    ));
                }
            }
            let hint = if path.is_dir() {
                " (a folder has this output's name: move it away or choose another --out)"
            } else {
                ""
            };
            let outcome = if unrestored.is_empty() {
                "no output was written and the folder is as it was".to_string()
            } else {
                format!("could not restore {}", unrestored.join(", "))
            };
            drop(files); // temporary files and new folders go
            Err(FlexureError::write(&path, format!("{e}{hint}; {outcome}")))
        }
    }
}

/// Refuses two staged files with the same target: same folder and file names equal ignoring
/// case (as on some file systems), naming the file and both sources.
fn refuse_collisions(files: &[StagedFile]) -> Result<()> {
    let mut seen: std::collections::HashMap<(PathBuf, String), usize> =
        std::collections::HashMap::new();
    for (k, f) in files.iter().enumerate() {
        let folder = parent_of(&f.target);
        let folder = std::fs::canonicalize(folder).unwrap_or_else(|_| folder.to_path_buf());
        let name = f
            .target
            .file_name()
            .unwrap_or_default()
            .to_string_lossy()
            .to_lowercase();
        if let Some(&j) = seen.get(&(folder.clone(), name.clone())) {
            let first = &files[j];
            let what = match (&first.source, &f.source) {
                (Some(a), Some(b)) => format!(": {a} and {b}"),
                (Some(a), None) | (None, Some(a)) => format!(": {a} and another output"),
                (None, None) => String::new(),
            };
            let same = if first.target == f.target {
                String::new()
            } else {
                format!(
                    " (and {}; case ignored, as on some file systems)",
                    first.target.display()
                )
            };
            return Err(FlexureError::write(
                &f.target,
                format!(
                    "two outputs of this run have this file name{same}{what}; rename one so that their file names differ (nothing was written)"
                ),
            ));
        }
        seen.insert((folder, name), k);
    }
    Ok(())
}

/// Refuses, inside a [`RunTransaction`], a target an earlier job of the same run has written.
fn refuse_earlier_outputs(files: &[StagedFile]) -> Result<()> {
    let runs = RUN.lock().unwrap_or_else(|e| e.into_inner());
    let this = std::thread::current().id();
    let Some((_, log)) = runs.iter().find(|(t, _)| *t == this) else {
        return Ok(());
    };
    let key = |p: &Path| {
        let folder = std::fs::canonicalize(parent_of(p)).unwrap_or_else(|_| parent_of(p).into());
        let name = p.file_name().unwrap_or_default().to_string_lossy();
        folder.join(name.to_lowercase())
    };
    let earlier: std::collections::HashSet<PathBuf> = log.placed.iter().map(|p| key(p)).collect();
    match files.iter().find(|f| earlier.contains(&key(&f.target))) {
        Some(f) => Err(FlexureError::write(
            &f.target,
            "an earlier step of this run wrote this file; give the steps different output names (nothing of this run was kept)",
        )),
        None => Ok(()),
    }
}

/// The commits of the jobs of one run, held open until the run ends (see [`RunTransaction`]).
#[derive(Default)]
struct RunLog {
    /// Targets renamed into place, in commit order.
    placed: Vec<PathBuf>,
    /// (target, backup) of every previous version moved aside.
    backups: Vec<(PathBuf, PathBuf)>,
    /// Folders created for the run's outputs.
    folders: Vec<Arc<CreatedFolder>>,
}

/// The open runs, by the thread that opened them (the thread whose job commits belong to it).
static RUN: Mutex<Vec<(ThreadId, RunLog)>> = Mutex::new(Vec::new());

/// Takes the log of the run `thread` opened, if any, out of [`RUN`].
fn take_run(thread: ThreadId) -> Option<RunLog> {
    let mut runs = RUN.lock().unwrap_or_else(|e| e.into_inner());
    let k = runs.iter().position(|(t, _)| *t == thread)?;
    Some(runs.swap_remove(k).1)
}

/// Several jobs run as one transaction (`flexure run`): while it is open, every job commits
/// its outputs as usual ([`commit_all`]), so later jobs read them where they belong, but the
/// previous versions of replaced files stay in their hidden backups and new folders stay
/// provisional. [`RunTransaction::finish`] makes the whole run final; dropping it unfinished
/// (any error, or Ctrl-C through [`discard_uncommitted`]) removes every output of the run,
/// restores the previous versions and removes the folders the run created, so the output
/// folder is as it was before the run. A later job of the run may not replace an earlier
/// job's output. The run holds the commits made on the thread that began it.
pub struct RunTransaction {
    thread: ThreadId,
    finished: bool,
}

impl RunTransaction {
    /// Opens a run for the jobs this thread commits; one run at a time per thread.
    pub fn begin() -> Result<Self> {
        let thread = std::thread::current().id();
        let mut runs = RUN.lock().unwrap_or_else(|e| e.into_inner());
        if runs.iter().any(|(t, _)| *t == thread) {
            return Err(FlexureError::Parameter(
                "a run is already under way on this thread".into(),
            ));
        }
        runs.push((thread, RunLog::default()));
        Ok(Self {
            thread,
            finished: false,
        })
    }

    /// The outputs committed so far by the run's jobs, in commit order.
    pub fn outputs(&self) -> Vec<PathBuf> {
        let runs = RUN.lock().unwrap_or_else(|e| e.into_inner());
        runs.iter()
            .find(|(t, _)| *t == self.thread)
            .map(|(_, log)| log.placed.clone())
            .unwrap_or_default()
    }

    /// Makes the run final: removes the backups of replaced files and keeps its folders.
    pub fn finish(mut self) {
        let _committing = COMMIT.lock().unwrap_or_else(|e| e.into_inner());
        if let Some(log) = take_run(self.thread) {
            for (_, backup) in &log.backups {
                let _ = std::fs::remove_file(backup);
            }
            for folder in &log.folders {
                folder.kept.store(true, Ordering::SeqCst);
            }
        }
        self.finished = true;
    }
}

impl Drop for RunTransaction {
    fn drop(&mut self) {
        if !self.finished {
            let _committing = COMMIT.lock().unwrap_or_else(|e| e.into_inner());
            if let Some(log) = take_run(self.thread) {
                roll_back(log);
            }
        }
    }
}

/// Undoes a run: its outputs go, previous versions come back, and the folders it created are
/// removed (deepest first, when empty). The caller holds `COMMIT`.
fn roll_back(mut log: RunLog) {
    for target in log.placed.iter().rev() {
        let _ = std::fs::remove_file(target);
    }
    for (target, backup) in log.backups.iter().rev() {
        let _ = std::fs::rename(backup, target);
    }
    log.folders
        .sort_by_key(|f| std::cmp::Reverse(f.path.components().count()));
    for folder in log.folders {
        drop(folder);
    }
}

/// `DIR/.NAME.partial-PID.EXT`: a hidden sibling of the final path with the same extension
/// (some GDAL drivers check it).
pub fn temporary_path(path: &Path) -> PathBuf {
    hidden_sibling(path, "partial")
}

/// `DIR/.NAME.backup-PID.EXT`: where an existing target waits while a commit runs.
fn backup_path(path: &Path) -> PathBuf {
    hidden_sibling(path, "backup")
}

fn hidden_sibling(path: &Path, tag: &str) -> PathBuf {
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().to_string())
        .unwrap_or_default();
    let ext = path
        .extension()
        .map(|e| e.to_string_lossy().to_string())
        .unwrap_or_else(|| "tmp".into());
    path.with_file_name(format!(".{name}.{tag}-{}.{ext}", std::process::id()))
}

/// The folder of `path` (`.` for a bare file name).
fn parent_of(path: &Path) -> &Path {
    path.parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."))
}

/// Checks that files can be created in `dir`, creating it (and its missing parents) for the
/// check only: folders it created are removed again, and the job's first staged file creates
/// them for good ([`StagedFile::new`]), so a job that fails later leaves no new folder.
pub fn prepare_output_dir(dir: &Path) -> Result<()> {
    let unwritable = |e: std::io::Error| {
        FlexureError::write(dir, format!("{e}; choose a writable output folder"))
    };
    let held = hold_folders(dir).map_err(unwritable)?;
    let probe = dir.join(format!(".flexure-write-test-{}", std::process::id()));
    let written = std::fs::write(&probe, b"").map_err(unwritable);
    let _ = std::fs::remove_file(&probe);
    drop(held);
    written
}

/// A folder created for outputs: removed when its last holder goes unless a commit kept it
/// (and only when empty).
#[derive(Debug)]
struct CreatedFolder {
    path: PathBuf,
    kept: AtomicBool,
}

impl Drop for CreatedFolder {
    fn drop(&mut self) {
        if !self.kept.load(Ordering::SeqCst) {
            let _ = std::fs::remove_dir(&self.path);
        }
    }
}

/// Temporary files of this process that may exist and belong to no final output yet.
static LIVE_TEMPORARIES: Mutex<Vec<PathBuf>> = Mutex::new(Vec::new());

/// Records `path` as a temporary file of this process (see [`discard_uncommitted`]).
pub(crate) fn track_temporary(path: &Path) {
    let mut live = LIVE_TEMPORARIES.lock().unwrap_or_else(|e| e.into_inner());
    live.push(path.to_path_buf());
}

/// Forgets `path` (once removed or renamed into place).
pub(crate) fn untrack_temporary(path: &Path) {
    let mut live = LIVE_TEMPORARIES.lock().unwrap_or_else(|e| e.into_inner());
    if let Some(i) = live.iter().position(|p| p == path) {
        live.swap_remove(i);
    }
}

/// Held while a job commits its outputs, and by [`discard_uncommitted`].
static COMMIT: Mutex<()> = Mutex::new(());

/// Files GDAL may leave beside a dataset it wrote (SQLite journals of a GeoPackage, auxiliary
/// metadata); they never belong to a final file.
fn remove_side_files(temp: &Path) {
    for suffix in ["-journal", "-wal", "-shm", ".aux.xml"] {
        let mut side = temp.to_path_buf().into_os_string();
        side.push(suffix);
        let _ = std::fs::remove_file(PathBuf::from(side));
    }
}

/// What [`discard_uncommitted`] holds: while it lives, no output can be staged or committed
/// (the threads that try wait), so the process must end before dropping it, without running
/// exit handlers (`_exit`).
pub struct Discarded {
    _commit: std::sync::MutexGuard<'static, ()>,
    _live: std::sync::MutexGuard<'static, Vec<PathBuf>>,
}

/// For a signal handler (Ctrl-C, SIGTERM) about to end the process: waits for a commit under
/// way to finish (or roll back), then removes every temporary file this process has staged and
/// not committed (with GDAL's side files), twice, a moment apart, to catch a file whose name
/// was reserved just before, and the folders created for outputs that are then empty. The
/// returned guard stops any further staging or commit until the process ends.
pub fn discard_uncommitted() -> Discarded {
    let commit = COMMIT.lock().unwrap_or_else(|e| e.into_inner());
    let live = LIVE_TEMPORARIES.lock().unwrap_or_else(|e| e.into_inner());
    let remove_all = || {
        for temp in live.iter() {
            let _ = std::fs::remove_file(temp);
            remove_side_files(temp);
        }
    };
    remove_all();
    std::thread::sleep(std::time::Duration::from_millis(100));
    remove_all();
    let runs = std::mem::take(&mut *RUN.lock().unwrap_or_else(|e| e.into_inner()));
    runs.into_iter().for_each(|(_, log)| roll_back(log));
    let registry = CREATED_FOLDERS.lock().unwrap_or_else(|e| e.into_inner());
    let mut folders: Vec<PathBuf> = registry
        .iter()
        .filter_map(Weak::upgrade)
        .filter(|f| !f.kept.load(Ordering::SeqCst))
        .map(|f| f.path.clone())
        .collect();
    folders.sort_by_key(|p| std::cmp::Reverse(p.components().count()));
    for folder in folders {
        let _ = std::fs::remove_dir(folder);
    }
    drop(registry);
    Discarded {
        _commit: commit,
        _live: live,
    }
}

/// Folders created for outputs that are still held by a staged file, so that a file staged in
/// a folder another staged file created holds it too.
static CREATED_FOLDERS: Mutex<Vec<Weak<CreatedFolder>>> = Mutex::new(Vec::new());

/// Creates the missing folders of `dir` and returns every folder created for outputs that
/// holds it (new or still held by another staged file), deepest first, so that dropping them
/// in order removes inner folders before outer ones.
fn hold_folders(dir: &Path) -> std::io::Result<Vec<Arc<CreatedFolder>>> {
    let mut registry = CREATED_FOLDERS.lock().unwrap_or_else(|e| e.into_inner());
    registry.retain(|w| w.strong_count() > 0);
    let mut missing = Vec::new();
    let mut existing = if dir.as_os_str().is_empty() {
        Path::new(".")
    } else {
        dir
    };
    while std::fs::symlink_metadata(existing).is_err() {
        missing.push(existing);
        match existing.parent() {
            Some(p) if !p.as_os_str().is_empty() => existing = p,
            _ => {
                existing = Path::new(".");
                break;
            }
        }
    }
    let mut held: Vec<Arc<CreatedFolder>> = Vec::new();
    if let Ok(canonical) = std::fs::canonicalize(existing) {
        for ancestor in canonical.ancestors() {
            held.extend(
                registry
                    .iter()
                    .filter_map(Weak::upgrade)
                    .filter(|f| f.path == ancestor),
            );
        }
    }
    for folder in missing.iter().rev() {
        match std::fs::create_dir(folder) {
            Ok(()) => {
                let path = std::fs::canonicalize(folder).unwrap_or_else(|_| folder.to_path_buf());
                let created = Arc::new(CreatedFolder {
                    path,
                    kept: AtomicBool::new(false),
                });
                registry.push(Arc::downgrade(&created));
                held.push(created);
            }
            Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists && folder.is_dir() => {}
            Err(e) => {
                drop(registry);
                held.sort_by_key(|f| std::cmp::Reverse(f.path.components().count()));
                return Err(e);
            }
        }
    }
    held.sort_by_key(|f| std::cmp::Reverse(f.path.components().count()));
    Ok(held)
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::collections::BTreeMap;

    /// Every file and folder under `dir` (hidden ones included), with the bytes of the files.
    fn snapshot(dir: &Path) -> BTreeMap<PathBuf, Option<Vec<u8>>> {
        let mut out = BTreeMap::new();
        let mut stack = vec![dir.to_path_buf()];
        while let Some(d) = stack.pop() {
            for e in std::fs::read_dir(&d).unwrap() {
                let p = e.unwrap().path();
                let rel = p.strip_prefix(dir).unwrap().to_path_buf();
                if p.is_dir() {
                    out.insert(rel, None);
                    stack.push(p);
                } else {
                    out.insert(rel, Some(std::fs::read(&p).unwrap()));
                }
            }
        }
        out
    }

    fn staged(target: &Path, bytes: &[u8]) -> StagedFile {
        let f = StagedFile::new(target);
        std::fs::write(f.temp(), bytes).unwrap();
        f
    }

    /// A previous run's `a.txt` and `b.txt`, and a new run of `a.txt`, `b.txt`, `new/c.txt`
    /// and `d.txt` staged over them.
    fn rerun(dir: &Path) -> Vec<StagedFile> {
        std::fs::write(dir.join("a.txt"), b"old a").unwrap();
        std::fs::write(dir.join("b.txt"), b"old b").unwrap();
        vec![
            staged(&dir.join("a.txt"), b"new a"),
            staged(&dir.join("b.txt"), b"new b"),
            staged(&dir.join("new").join("c.txt"), b"new c"),
            staged(&dir.join("d.txt"), b"new d"),
        ]
    }

    #[test]
    fn a_rerun_replaces_every_file_and_leaves_no_backup() {
        // Common practice (POSIX rename(2) replaces its target): existing outputs are
        // replaced, new ones appear, nothing hidden is left.
        let dir = tempfile::tempdir().unwrap();
        commit_all(rerun(dir.path())).unwrap();
        let want: BTreeMap<PathBuf, Option<Vec<u8>>> = [
            ("a.txt", Some(&b"new a"[..])),
            ("b.txt", Some(b"new b")),
            ("new", None),
            ("new/c.txt", Some(b"new c")),
            ("d.txt", Some(b"new d")),
        ]
        .into_iter()
        .map(|(p, b)| (PathBuf::from(p), b.map(<[u8]>::to_vec)))
        .collect();
        assert_eq!(snapshot(dir.path()), want);
    }

    #[test]
    fn a_failure_at_any_rename_leaves_the_folder_as_it_was() {
        // Common practice for all-or-nothing commits (backups, then renames, rolled back on
        // failure): whichever rename fails, the previous run's files are byte-identical and no
        // new file, folder, temporary or backup remains.
        let renames = {
            let dir = tempfile::tempdir().unwrap();
            let mut count = 0;
            commit_with(rerun(dir.path()), &mut |a, b| {
                count += 1;
                std::fs::rename(a, b)
            })
            .unwrap();
            count
        };
        assert_eq!(renames, 2 + 4, "two backups, four renames in");
        for fail_at in 0..renames {
            let dir = tempfile::tempdir().unwrap();
            let files = rerun(dir.path());
            let before: BTreeMap<_, _> = snapshot(dir.path())
                .into_iter()
                .filter(|(p, _)| !p.to_string_lossy().contains("partial") && !p.starts_with("new"))
                .collect();
            let mut calls = 0;
            let err = commit_with(files, &mut |a, b| {
                calls += 1;
                if calls == fail_at + 1 {
                    Err(std::io::Error::other("injected failure"))
                } else {
                    std::fs::rename(a, b)
                }
            })
            .unwrap_err()
            .to_string();
            assert!(
                err.contains("injected failure; no output was written and the folder is as it was"),
                "{err}"
            );
            assert_eq!(snapshot(dir.path()), before, "failure at rename {fail_at}");
        }
    }

    #[test]
    fn a_folder_in_a_target_place_fails_the_commit_and_it_rolls_back() {
        // POSIX rename(2): a file cannot replace a directory (EISDIR); the outputs renamed
        // before it are taken back.
        let dir = tempfile::tempdir().unwrap();
        let files = rerun(dir.path());
        std::fs::create_dir(dir.path().join("d.txt")).unwrap();
        std::fs::write(dir.path().join("d.txt").join("keep"), b"k").unwrap();
        let before: BTreeMap<_, _> = snapshot(dir.path())
            .into_iter()
            .filter(|(p, _)| !p.to_string_lossy().contains("partial") && !p.starts_with("new"))
            .collect();
        let err = commit_all(files).unwrap_err().to_string();
        assert!(err.starts_with("cannot write "), "{err}");
        assert!(err.contains("d.txt: "), "{err}");
        assert!(err.contains("a folder has this output's name"), "{err}");
        assert_eq!(err.lines().count(), 1);
        assert_eq!(snapshot(dir.path()), before);
    }

    #[test]
    fn two_outputs_with_one_file_name_are_refused_before_anything_is_renamed() {
        // Common practice: one commit, one owner per file name; case is ignored because some
        // file systems ignore it.
        let dir = tempfile::tempdir().unwrap();
        std::fs::write(dir.path().join("a.txt"), b"old a").unwrap();
        let before = snapshot(dir.path());
        let files = vec![
            staged(&dir.path().join("a.txt"), b"new a"),
            staged(&dir.path().join("sub").join("W_1_2.png"), b"1")
                .with_source("rose of well W_1 stage 2"),
            staged(&dir.path().join("sub").join("w_1_2.png"), b"2")
                .with_source("rose of well w stage 1_2"),
        ];
        let err = commit_all(files).unwrap_err().to_string();
        assert!(
            err.contains("w_1_2.png: two outputs of this run have this file name"),
            "{err}"
        );
        assert!(err.contains("W_1_2.png; case ignored"), "{err}");
        assert!(
            err.contains(": rose of well W_1 stage 2 and rose of well w stage 1_2; rename one"),
            "{err}"
        );
        assert_eq!(snapshot(dir.path()), before);
        // The same path twice (the second staging overwrote the first's temporary file).
        let files = vec![
            staged(&dir.path().join("x.tif"), b"1"),
            staged(&dir.path().join("x.tif"), b"2"),
        ];
        let err = commit_all(files).unwrap_err().to_string();
        assert!(
            err.contains("x.tif: two outputs of this run have this file name; rename"),
            "{err}"
        );
        assert_eq!(snapshot(dir.path()), before);
    }

    #[test]
    fn folders_made_for_outputs_go_with_a_failed_job_and_stay_with_a_commit() {
        // Our rule: a failed job leaves no new folder; a folder that held something before, or
        // that holds something else, stays.
        let dir = tempfile::tempdir().unwrap();
        let out = dir.path().join("out");
        let files = vec![
            staged(&out.join("roses").join("a.png"), b"a"),
            staged(&out.join("roses").join("b.png"), b"b"),
            staged(&out.join("wells").join("p.csv"), b"p"),
            staged(&out.join("stages.csv"), b"s"),
        ];
        assert!(out.join("roses").is_dir() && out.join("wells").is_dir());
        drop(files); // the job failed before its commit
        assert!(!out.exists(), "{:?}", snapshot(dir.path()));
        // A folder that holds a file of someone else's stays.
        let files = vec![staged(&out.join("roses").join("a.png"), b"a")];
        std::fs::write(out.join("roses").join("mine.txt"), b"m").unwrap();
        drop(files);
        assert_eq!(
            snapshot(dir.path()).keys().cloned().collect::<Vec<_>>(),
            ["out", "out/roses", "out/roses/mine.txt"].map(PathBuf::from)
        );
        // Committed, the folders stay.
        let other = dir.path().join("other");
        commit_all(vec![staged(&other.join("deep").join("x.txt"), b"x")]).unwrap();
        assert_eq!(
            std::fs::read(other.join("deep").join("x.txt")).unwrap(),
            b"x"
        );
    }

    #[test]
    fn preparing_an_output_folder_checks_it_and_leaves_it_as_it_was() {
        // Our rule: the early check of an output folder creates nothing that stays.
        let dir = tempfile::tempdir().unwrap();
        let out = dir.path().join("a").join("b");
        prepare_output_dir(&out).unwrap();
        assert!(snapshot(dir.path()).is_empty());
        let file = dir.path().join("f");
        std::fs::write(&file, b"").unwrap();
        let err = prepare_output_dir(&file.join("sub"))
            .unwrap_err()
            .to_string();
        assert!(err.contains("choose a writable output folder"), "{err}");
        assert_eq!(snapshot(dir.path()).len(), 1);
    }

    #[test]
    fn a_failed_run_undoes_every_earlier_commit_and_a_finished_run_keeps_them() {
        // Common practice (all-or-nothing runs: earlier steps' commits are rolled back when a
        // later step fails): after the drop, the folder is byte-identical to before the run.
        let dir = tempfile::tempdir().unwrap();
        std::fs::write(dir.path().join("a.txt"), b"old a").unwrap();
        let before = snapshot(dir.path());
        {
            let run = RunTransaction::begin().unwrap();
            commit_all(vec![
                staged(&dir.path().join("a.txt"), b"new a"),
                staged(&dir.path().join("step1").join("b.txt"), b"new b"),
            ])
            .unwrap();
            staged(&dir.path().join("step2").join("c.txt"), b"new c")
                .commit()
                .unwrap();
            assert_eq!(run.outputs().len(), 3);
            assert_eq!(std::fs::read(dir.path().join("a.txt")).unwrap(), b"new a");
            // The run fails here: `run` drops unfinished.
        }
        assert_eq!(snapshot(dir.path()), before);

        let run = RunTransaction::begin().unwrap();
        commit_all(rerun(dir.path())).unwrap();
        run.finish();
        let after = snapshot(dir.path());
        assert_eq!(
            after.len(),
            5,
            "a, b, new/, new/c, d and no backup: {after:?}"
        );
        assert_eq!(after[Path::new("a.txt")], Some(b"new a".to_vec()));
    }

    #[test]
    fn a_run_refuses_a_later_step_writing_an_earlier_steps_file() {
        // Two steps of one run with the same output name would silently replace the first.
        let dir = tempfile::tempdir().unwrap();
        let run = RunTransaction::begin().unwrap();
        staged(&dir.path().join("map.png"), b"first")
            .commit()
            .unwrap();
        let err = staged(&dir.path().join("MAP.png"), b"second")
            .commit()
            .unwrap_err()
            .to_string();
        assert!(err.contains("an earlier step of this run"), "{err}");
        drop(run);
        assert!(snapshot(dir.path()).is_empty());
    }
}
