//! Files on disk: whole text inputs read under a size cap, and outputs that are never half
//! written, never clobber what they should not, and leave nothing behind.
//!
//! An output (a folder or a single file) is claimed when a command starts: its path is
//! checked (a folder output must not be an existing file, a file output not a folder), and
//! a lock file beside it (`.NAME.slackmap-lock`, holding the writer's pid) keeps two runs
//! from writing it at once. The lock is the operating system's advisory lock, so a killed
//! holder releases it and never blocks a later run. Everything is then written to a
//! temporary beside the target (`.NAME.slackmap-tmp-PID`) and renamed into place only when
//! the command has succeeded; a run that was killed leaves temporaries that the next run
//! holding the lock removes. [`abandon`] removes every live temporary at once, for a
//! signal handler about to end the process.

use std::fs::{self, File};
use std::io::{Read, Write};
use std::path::{Path, PathBuf};
use std::sync::Mutex;

use crate::error::{echo_path, Error, Result};

/// Paths this process would leave behind if it stopped now, with how to remove each:
/// staging folders and files and lock files (`Gone::Tree`, `Gone::File`), and parent
/// folders a claim created (`Gone::IfEmpty`). The mutex is also held while outputs are
/// renamed into place, so [`abandon`] never runs in the middle of a commit.
static LIVE: Mutex<Vec<(PathBuf, Gone)>> = Mutex::new(Vec::new());

#[derive(Copy, Clone, Debug, PartialEq, Eq)]
enum Gone {
    Tree,
    File,
    IfEmpty,
}

fn live() -> std::sync::MutexGuard<'static, Vec<(PathBuf, Gone)>> {
    LIVE.lock().unwrap_or_else(|p| p.into_inner())
}

fn register(p: &Path, how: Gone) {
    live().push((p.to_path_buf(), how));
}

fn forget(l: &mut Vec<(PathBuf, Gone)>, p: &Path) {
    if let Some(i) = l.iter().rposition(|(x, _)| x == p) {
        l.remove(i);
    }
}

fn unregister(p: &Path) {
    forget(&mut live(), p);
}

/// Removes every temporary, lock file and created folder this process still has, newest
/// first. For a signal handler that ends the process right after; waits for a commit in
/// progress to finish, so an output is either wholly old or wholly new.
pub fn abandon() {
    abandon_where(|_| true);
}

fn abandon_where(pick: impl Fn(&Path) -> bool) {
    let mut l = live();
    let mut kept = Vec::new();
    while let Some((p, how)) = l.pop() {
        if !pick(&p) {
            kept.push((p, how));
            continue;
        }
        match how {
            Gone::Tree | Gone::File => remove_any(&p),
            Gone::IfEmpty => {
                let _ = fs::remove_dir(&p);
            }
        }
    }
    kept.reverse();
    *l = kept;
}

/// Removes a file, or a folder with everything in it; a path that is already gone is fine.
fn remove_any(p: &Path) {
    match fs::symlink_metadata(p) {
        Ok(m) if m.is_dir() => {
            let _ = fs::remove_dir_all(p);
        }
        Ok(_) => {
            let _ = fs::remove_file(p);
        }
        Err(_) => {}
    }
}

/// Reads a whole text file, refusing one larger than `max_bytes` (a file that never ends,
/// such as a pipe or a device, is read only that far). `what` names the file's role in
/// messages ("noise file"). Invalid UTF-8 is an error naming the line.
pub fn read_text_capped(path: &Path, max_bytes: u64, what: &str) -> Result<String> {
    let file = File::open(path).map_err(|e| Error::io(path, e))?;
    if file.metadata().map(|m| m.is_dir()).unwrap_or(false) {
        return Err(Error::input(path, None, format!("is a folder, not a {what}")));
    }
    let mut bytes = Vec::new();
    file.take(max_bytes + 1).read_to_end(&mut bytes).map_err(|e| Error::io(path, e))?;
    if bytes.len() as u64 > max_bytes {
        return Err(Error::input(
            path,
            None,
            format!(
                "larger than {}, the most a {what} may be; is this the right file?",
                size_text(max_bytes)
            ),
        ));
    }
    String::from_utf8(bytes).map_err(|e| {
        let at = e.utf8_error().valid_up_to();
        let before = &e.as_bytes()[..at];
        let line = before.iter().filter(|&&b| b == b'\n').count() + 1;
        let column = at - before.iter().rposition(|&b| b == b'\n').map_or(0, |i| i + 1) + 1;
        Error::input(
            path,
            Some(line),
            format!("byte {column} of the line is not UTF-8 text; save the {what} as UTF-8"),
        )
    })
}

/// A reader that fails, instead of growing a buffer without end, once one line runs longer
/// than `max_line` bytes: streaming readers (counts) hold a whole line at a time, so an
/// endless line (a device, a file without line breaks) would otherwise take all memory.
pub struct LineCapped<R> {
    inner: R,
    max_line: u64,
    what: &'static str,
    /// Bytes of the current line so far.
    run: u64,
    /// Lines completed so far.
    lines: usize,
}

impl<R: Read> LineCapped<R> {
    /// Caps the lines of `inner` at `max_line` bytes; `what` names the file in messages.
    pub fn new(inner: R, max_line: u64, what: &'static str) -> LineCapped<R> {
        LineCapped { inner, max_line, what, run: 0, lines: 0 }
    }
}

impl<R: Read> Read for LineCapped<R> {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        let n = self.inner.read(buf)?;
        for &b in &buf[..n] {
            if b == b'\n' {
                self.lines += 1;
                self.run = 0;
            } else {
                self.run += 1;
            }
        }
        if self.run > self.max_line {
            return Err(std::io::Error::new(
                std::io::ErrorKind::InvalidData,
                format!(
                    "line {} is longer than {}, the most a line of a {} may be; is this the \
                     right file?",
                    self.lines + 1,
                    size_text(self.max_line),
                    self.what
                ),
            ));
        }
        Ok(n)
    }
}

/// Appends up to `block` bytes of `file` to `buf`: how many (0 at the end of the file);
/// `None` on a read error (the callers then read the file again their ordinary way, which
/// reports it).
pub(crate) fn read_block(file: &mut File, buf: &mut Vec<u8>, block: usize) -> Option<usize> {
    file.take(block as u64).read_to_end(buf).ok()
}

/// What [`read_ahead`]'s `cut` makes of the bytes buffered so far.
pub(crate) enum Cut<P> {
    /// A piece taken out of the buffer, ready for the caller.
    Piece(P),
    /// Nothing yet: read more.
    More,
    /// The file is not one this reading takes.
    Refuse,
}

/// Reads `file` `block` bytes at a time on a thread of its own, a piece ahead of the caller,
/// so that reading and cutting the next block overlap the caller's work on this one (a
/// reader's serial share: the parsing is parallel already). The buffer starts as `start`;
/// after each read, `cut` gets it and whether the file has ended, and takes out of it what
/// is ready. `each` gets the pieces in file order. `None` when the file cannot be read, when
/// `cut` refuses it or when `each` gives up (the callers then read the file their ordinary
/// way, which gives every message); the reading thread stops with the caller.
pub(crate) fn read_ahead<P: Send>(
    mut file: File,
    start: Vec<u8>,
    block: usize,
    mut cut: impl FnMut(&mut Vec<u8>, bool) -> Cut<P> + Send,
    mut each: impl FnMut(P) -> Option<()>,
) -> Option<()> {
    // One piece in the channel and one being cut: memory is about three blocks.
    let (tx, rx) = std::sync::mpsc::sync_channel::<Option<P>>(1);
    std::thread::scope(|scope| {
        scope.spawn(move || {
            let mut buf = start;
            loop {
                buf.reserve(block);
                let Some(got) = read_block(&mut file, &mut buf, block) else {
                    let _ = tx.send(None);
                    return;
                };
                let ended = got == 0;
                match cut(&mut buf, ended) {
                    Cut::Refuse => {
                        let _ = tx.send(None);
                        return;
                    }
                    Cut::Piece(p) => {
                        // The caller has given up when its end is gone.
                        if tx.send(Some(p)).is_err() {
                            return;
                        }
                    }
                    Cut::More => {}
                }
                if ended {
                    return;
                }
            }
        });
        for piece in rx {
            each(piece?)?;
        }
        Some(())
    })
}

/// Takes the first `end` bytes out of `buf` without copying them (the rest, a part record,
/// is copied into a new buffer).
pub(crate) fn take_front(buf: &mut Vec<u8>, end: usize) -> Vec<u8> {
    let rest = buf.split_off(end);
    std::mem::replace(buf, rest)
}

/// A byte count for messages: `64 MiB`, `16 GiB`, `512 bytes`.
pub fn size_text(bytes: u64) -> String {
    const UNITS: [(&str, u64); 3] = [("GiB", 1 << 30), ("MiB", 1 << 20), ("KiB", 1 << 10)];
    for (name, size) in UNITS {
        if bytes >= size && bytes.is_multiple_of(size) {
            return format!("{} {name}", bytes / size);
        }
        if bytes >= size {
            return format!("{:.1} {name}", bytes as f64 / size as f64);
        }
    }
    format!("{bytes} bytes")
}

/// True for the path `-`, which means standard output where a single file is written.
pub fn is_stdout(path: &Path) -> bool {
    path.as_os_str() == "-"
}

/// True when `a` and `b` name the same existing file (also through links or `..`).
pub fn same_file(a: &Path, b: &Path) -> bool {
    match (fs::canonicalize(a), fs::canonicalize(b)) {
        (Ok(x), Ok(y)) if x == y => return true,
        _ => {}
    }
    #[cfg(unix)]
    {
        use std::os::unix::fs::MetadataExt;
        if let (Ok(x), Ok(y)) = (fs::metadata(a), fs::metadata(b)) {
            return x.dev() == y.dev() && x.ino() == y.ino();
        }
    }
    false
}

/// True when two output paths name the same file, existing or not: the same existing file,
/// or the same name in the same (resolved) folder.
pub fn same_target(a: &Path, b: &Path) -> bool {
    let spelled = |p: &Path| -> PathBuf {
        match (p.parent(), p.file_name()) {
            (Some(parent), Some(name)) => {
                let parent = if parent.as_os_str().is_empty() { Path::new(".") } else { parent };
                fs::canonicalize(parent).map(|c| c.join(name)).unwrap_or_else(|_| p.to_path_buf())
            }
            _ => p.to_path_buf(),
        }
    };
    same_file(a, b) || spelled(a) == spelled(b)
}

/// The resolved place of an output: its real parent folder (created if missing) and its
/// name there. A target that is a symbolic link is followed, so the link stays and what it
/// points to is replaced.
struct Place {
    /// As the user gave it, for messages.
    shown: PathBuf,
    parent: PathBuf,
    name: String,
    /// Parent folders this claim created, outermost first (removed again on failure).
    created: Vec<PathBuf>,
}

impl Place {
    fn resolve(target: &Path) -> Result<Place> {
        let shown = target.to_path_buf();
        let mut path = target.to_path_buf();
        if fs::symlink_metadata(&path).is_ok_and(|m| m.file_type().is_symlink()) {
            path = fs::canonicalize(&path).map_err(|e| {
                if e.kind() == std::io::ErrorKind::NotFound {
                    Error::Usage(format!(
                        "{} is a symbolic link to a path that does not exist; remove the link \
                         or give another output path",
                        echo_path(target)
                    ))
                } else {
                    Error::io(target, e)
                }
            })?;
        }
        let (parent, name) = match (path.parent(), path.file_name()) {
            (Some(p), Some(n)) => {
                let p = if p.as_os_str().is_empty() { Path::new(".") } else { p };
                (p.to_path_buf(), n.to_string_lossy().into_owned())
            }
            // `.`, `..` or `/`: the folder's own name in its parent.
            _ => {
                let real = fs::canonicalize(&path).map_err(|e| Error::io(target, e))?;
                match (real.parent(), real.file_name()) {
                    (Some(p), Some(n)) => (p.to_path_buf(), n.to_string_lossy().into_owned()),
                    _ => {
                        return Err(Error::Usage(format!(
                            "cannot write an output in place of {}; give a folder below it",
                            echo_path(target)
                        )))
                    }
                }
            }
        };
        let mut created = Vec::new();
        let mut missing = Vec::new();
        let mut p = parent.as_path();
        while fs::symlink_metadata(p).is_err() {
            missing.push(p.to_path_buf());
            match p.parent() {
                Some(up) if !up.as_os_str().is_empty() => p = up,
                _ => break,
            }
        }
        for dir in missing.iter().rev() {
            match fs::create_dir(dir) {
                Ok(()) => {
                    register(dir, Gone::IfEmpty);
                    created.push(dir.clone());
                }
                Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => {}
                Err(e) => {
                    let place = Place { shown, parent, name, created };
                    drop(place);
                    return Err(Error::io(dir, e));
                }
            }
        }
        let mut place = Place { shown, parent, name, created };
        if !fs::metadata(&place.parent).map(|m| m.is_dir()).unwrap_or(false) {
            return Err(Error::Usage(format!(
                "{}: {} is not a folder",
                echo_path(target),
                echo_path(&place.parent)
            )));
        }
        // One spelling per place, so that two outputs (or an output and an input) that are
        // the same file compare equal.
        place.parent = fs::canonicalize(&place.parent).map_err(|e| Error::io(&place.parent, e))?;
        Ok(place)
    }

    fn target(&self) -> PathBuf {
        self.parent.join(&self.name)
    }

    fn sibling(&self, tag: &str) -> PathBuf {
        self.parent.join(format!(".{}.slackmap-{tag}", self.name))
    }

    /// The staging path of this process.
    fn staging(&self) -> PathBuf {
        self.sibling(&format!("tmp-{}", std::process::id()))
    }

    /// Removes what killed runs left beside this target: staging folders and files
    /// (incomplete, always removed) and a previous version set aside by a swap that was
    /// cut short (put back when the target is missing, else removed). Called with the lock
    /// held, so no live run of this version owns them; a pid that is still alive (a run of
    /// an older version, which took no lock) is left alone.
    fn sweep(&self) {
        let Ok(entries) = fs::read_dir(&self.parent) else { return };
        let prefix = format!(".{}.", self.name);
        for entry in entries.flatten() {
            let fname = entry.file_name().to_string_lossy().into_owned();
            let Some(rest) = fname.strip_prefix(&prefix) else { continue };
            let Some((leftover, pid)) = leftover_kind(rest) else { continue };
            if pid == std::process::id() || pid_alive(pid) {
                continue;
            }
            let path = entry.path();
            match leftover {
                Leftover::Staging => remove_any(&path),
                Leftover::SetAside => {
                    let target = self.target();
                    if fs::symlink_metadata(&target).is_err() {
                        let _ = fs::rename(&path, &target);
                    } else if fs::symlink_metadata(&path).is_ok_and(|m| m.is_dir()) {
                        // Only folders: an older version once set a user's file aside
                        // under this name, and that file may be the only copy.
                        remove_any(&path);
                    }
                }
            }
        }
    }
}

impl Drop for Place {
    fn drop(&mut self) {
        for dir in self.created.iter().rev() {
            if fs::remove_dir(dir).is_ok() || fs::symlink_metadata(dir).is_err() {
                unregister(dir);
            }
        }
    }
}

enum Leftover {
    Staging,
    SetAside,
}

/// What a hidden sibling name (after `.NAME.`) is, with its owner's pid; also the names
/// earlier versions used (`tmp-PID`, `partial-PID`, `PID.tmp`, `old-PID`).
fn leftover_kind(rest: &str) -> Option<(Leftover, u32)> {
    let rest = rest.strip_prefix("slackmap-").unwrap_or(rest);
    let digits = |s: &str| -> Option<u32> {
        (!s.is_empty() && s.bytes().all(|b| b.is_ascii_digit())).then(|| s.parse().ok())?
    };
    if let Some(pid) = rest.strip_prefix("tmp-").or(rest.strip_prefix("partial-")) {
        return digits(pid).map(|p| (Leftover::Staging, p));
    }
    if let Some(pid) = rest.strip_suffix(".tmp") {
        return digits(pid).map(|p| (Leftover::Staging, p));
    }
    if let Some(pid) = rest.strip_prefix("old-") {
        return digits(pid).map(|p| (Leftover::SetAside, p));
    }
    None
}

/// True when a process with this pid is running (a zombie, killed but not yet reaped, is
/// not); false where that cannot be told (no /proc), since the caller holds the output's
/// lock and so no run that locks is alive anyway.
fn pid_alive(pid: u32) -> bool {
    if !Path::new("/proc/self").exists() {
        return false;
    }
    match fs::read_to_string(format!("/proc/{pid}/stat")) {
        // The state letter follows the command name, which is in parentheses.
        Ok(stat) => stat
            .rsplit_once(')')
            .and_then(|(_, rest)| rest.trim_start().chars().next())
            .is_some_and(|state| state != 'Z' && state != 'X'),
        Err(_) => false,
    }
}

/// The lock on one output, held from the claim to the end of the command. Dropping it
/// removes the lock file and releases the lock.
struct Lock {
    path: PathBuf,
    _file: File,
}

impl Lock {
    fn take(place: &Place) -> Result<Lock> {
        let path = place.sibling("lock");
        for _ in 0..8 {
            let mut file = fs::OpenOptions::new()
                .read(true)
                .write(true)
                .create(true)
                .truncate(false)
                .open(&path)
                .map_err(|e| Error::io(&path, e))?;
            match file.try_lock() {
                Ok(()) => {}
                Err(fs::TryLockError::WouldBlock) => {
                    let mut holder = String::new();
                    let _ = file.read_to_string(&mut holder);
                    let holder = holder.trim();
                    if holder == std::process::id().to_string() {
                        return Err(Error::Usage(format!(
                            "{} is named twice as an output of this command; give each \
                             output its own path",
                            echo_path(&place.shown)
                        )));
                    }
                    let who = if holder.is_empty() {
                        "another slackmap run".to_string()
                    } else {
                        format!("another slackmap run (pid {})", crate::error::echo(holder))
                    };
                    return Err(Error::Usage(format!(
                        "{} is being written by {who}; wait for it to finish or choose \
                         another output (lock file {})",
                        echo_path(&place.shown),
                        echo_path(&path)
                    )));
                }
                // A file system without advisory locks: go on unlocked rather than refuse.
                Err(fs::TryLockError::Error(e)) if e.kind() == std::io::ErrorKind::Unsupported => {}
                Err(fs::TryLockError::Error(e)) => return Err(Error::io(&path, e)),
            }
            // A holder that finished unlinks the file before releasing it: the lock counts
            // only if the path still names the file that was locked.
            if !still_named(&file, &path) {
                continue;
            }
            register(&path, Gone::File);
            let lock = Lock { path, _file: file };
            let mut f = &lock._file;
            let _ = f.set_len(0);
            let _ = writeln!(f, "{}", std::process::id());
            return Ok(lock);
        }
        Err(Error::Usage(format!(
            "could not take the lock {} (other runs keep replacing it)",
            echo_path(&path)
        )))
    }
}

#[cfg(unix)]
fn still_named(file: &File, path: &Path) -> bool {
    use std::os::unix::fs::MetadataExt;
    match (file.metadata(), fs::metadata(path)) {
        (Ok(a), Ok(b)) => a.dev() == b.dev() && a.ino() == b.ino(),
        _ => false,
    }
}

#[cfg(not(unix))]
fn still_named(_file: &File, path: &Path) -> bool {
    path.exists()
}

impl Drop for Lock {
    fn drop(&mut self) {
        let _ = fs::remove_file(&self.path);
        unregister(&self.path);
    }
}

/// How a claimed folder may already exist.
#[derive(Copy, Clone, Debug, PartialEq, Eq)]
pub enum FolderRule {
    /// Missing or empty only (a design: its files belong together).
    New,
    /// May hold files: the ones this run writes are replaced, the others kept.
    Update,
}

/// An output folder claimed for one run: checked, locked and swept. Fill
/// [`OutputDir::staging`] (or call [`OutputDir::write_files`]), then [`OutputDir::commit`].
/// Dropped without a commit, it removes its staging folder and leaves the target as it
/// was.
pub struct OutputDir {
    // Fields drop in order: the lock file goes before the folders created for it.
    _lock: Lock,
    place: Place,
    rule: FolderRule,
    staging: PathBuf,
}

impl OutputDir {
    /// Claims `dir`: refuses an existing non-folder (and, under [`FolderRule::New`], a
    /// folder with files in it), takes the lock, removes leftovers of killed runs and
    /// creates an empty staging folder.
    pub fn claim(dir: &Path, rule: FolderRule) -> Result<OutputDir> {
        if is_stdout(dir) {
            return Err(Error::Usage(
                "--out -: this command writes a folder of files, not one stream; give a \
                 folder path"
                    .into(),
            ));
        }
        let place = Place::resolve(dir)?;
        let target = place.target();
        check_folder_target(&target, &place.shown, rule)?;
        let lock = Lock::take(&place)?;
        place.sweep();
        // Checked again under the lock: another run may have finished in between.
        check_folder_target(&target, &place.shown, rule)?;
        let staging = place.staging();
        remove_any(&staging);
        fs::create_dir(&staging).map_err(|e| Error::io(&staging, e))?;
        register(&staging, Gone::Tree);
        Ok(OutputDir { _lock: lock, place, rule, staging })
    }

    /// The folder to write this run's files into.
    pub fn staging(&self) -> &Path {
        &self.staging
    }

    /// The target folder, as the user named it.
    pub fn shown(&self) -> &Path {
        &self.place.shown
    }

    /// Writes `files` (paths relative to the folder) into the staging folder and commits.
    pub fn write_files(self, files: &[(String, Vec<u8>)]) -> Result<()> {
        for (fname, bytes) in files {
            let p = self.staging.join(fname);
            if let Some(d) = p.parent() {
                fs::create_dir_all(d).map_err(|e| Error::io(d, e))?;
            }
            fs::write(&p, bytes).map_err(|e| Error::io(&p, e))?;
        }
        self.commit()
    }

    /// Puts the staged files in place. Under [`FolderRule::Update`] the target's files
    /// that this run did not write are kept (hard-linked into the new folder, copied where
    /// links are not possible), and the old folder is swapped out in one rename.
    pub fn commit(self) -> Result<()> {
        let target = self.place.target();
        let exists = fs::symlink_metadata(&target).is_ok();
        if exists && self.rule == FolderRule::Update {
            keep_others(&target, &self.staging)?;
        }
        let aside = self.place.sibling(&format!("old-{}", std::process::id()));
        let mut l = live();
        if exists {
            match self.rule {
                // Fails, leaving everything as it was, if files appeared meanwhile.
                FolderRule::New => fs::remove_dir(&target).map_err(|e| Error::io(&target, e))?,
                FolderRule::Update => {
                    fs::rename(&target, &aside).map_err(|e| Error::io(&target, e))?
                }
            }
        }
        if let Err(e) = fs::rename(&self.staging, &target) {
            if exists && self.rule == FolderRule::Update {
                let _ = fs::rename(&aside, &target);
            }
            return Err(Error::io(&target, e));
        }
        forget(&mut l, &self.staging);
        // The target's parents now hold the output: keep them.
        for dir in &self.place.created {
            forget(&mut l, dir);
        }
        drop(l);
        if exists && self.rule == FolderRule::Update {
            remove_any(&aside);
        }
        let mut this = self;
        this.place.created.clear();
        Ok(())
    }
}

impl Drop for OutputDir {
    fn drop(&mut self) {
        if fs::symlink_metadata(&self.staging).is_ok() {
            remove_any(&self.staging);
        }
        unregister(&self.staging);
    }
}

fn check_folder_target(target: &Path, shown: &Path, rule: FolderRule) -> Result<()> {
    match fs::metadata(target) {
        Ok(m) if !m.is_dir() => Err(Error::Usage(format!(
            "--out {} is an existing file, not a folder; this command writes a folder of \
             files. Give a new folder path (the file is left as it is)",
            echo_path(shown)
        ))),
        Ok(_) if rule == FolderRule::New => {
            let empty = fs::read_dir(target).map_err(|e| Error::io(target, e))?.next().is_none();
            if empty {
                Ok(())
            } else {
                Err(Error::Usage(format!(
                    "output folder {} exists and is not empty; choose a new folder or remove it",
                    echo_path(shown)
                )))
            }
        }
        Ok(_) => Ok(()),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(()),
        Err(e) => Err(Error::io(shown, e)),
    }
}

/// Hard-links (or copies) every entry of `old` that `new` does not have into `new`.
fn keep_others(old: &Path, new: &Path) -> Result<()> {
    for entry in fs::read_dir(old).map_err(|e| Error::io(old, e))? {
        let entry = entry.map_err(|e| Error::io(old, e))?;
        let to = new.join(entry.file_name());
        let from = entry.path();
        if fs::symlink_metadata(&to).is_ok() {
            if to.is_dir() && from.is_dir() {
                keep_others(&from, &to)?;
            }
            continue;
        }
        link_tree(&from, &to)?;
    }
    Ok(())
}

fn link_tree(from: &Path, to: &Path) -> Result<()> {
    let meta = fs::symlink_metadata(from).map_err(|e| Error::io(from, e))?;
    if meta.is_dir() {
        fs::create_dir(to).map_err(|e| Error::io(to, e))?;
        for entry in fs::read_dir(from).map_err(|e| Error::io(from, e))? {
            let entry = entry.map_err(|e| Error::io(from, e))?;
            link_tree(&entry.path(), &to.join(entry.file_name()))?;
        }
    } else if meta.file_type().is_symlink() {
        let link = fs::read_link(from).map_err(|e| Error::io(from, e))?;
        symlink(&link, to).map_err(|e| Error::io(to, e))?;
    } else if fs::hard_link(from, to).is_err() {
        fs::copy(from, to).map_err(|e| Error::io(from, e))?;
    }
    Ok(())
}

#[cfg(unix)]
fn symlink(link: &Path, to: &Path) -> std::io::Result<()> {
    std::os::unix::fs::symlink(link, to)
}

#[cfg(not(unix))]
fn symlink(link: &Path, to: &Path) -> std::io::Result<()> {
    fs::copy(link, to).map(|_| ())
}

/// An output file claimed for one run, or standard output for the path `-`. Write it
/// through [`OutputFile::writer`], then [`OutputFile::commit`]; dropped without a commit
/// it removes its temporary and leaves the target as it was.
pub struct OutputFile {
    sink: FileSink,
}

enum FileSink {
    Stdout,
    /// A device or pipe (such as /dev/null): written directly, never replaced.
    Special {
        path: PathBuf,
    },
    // The lock drops before the folders created for it.
    Staged {
        _lock: Lock,
        place: Place,
        staging: PathBuf,
    },
}

impl OutputFile {
    /// Claims `path`: `-` is standard output; an existing folder is refused; the lock is
    /// taken and leftovers of killed runs removed.
    pub fn claim(path: &Path) -> Result<OutputFile> {
        if is_stdout(path) {
            return Ok(OutputFile { sink: FileSink::Stdout });
        }
        match fs::metadata(path) {
            Ok(m) if m.is_dir() => {
                return Err(Error::Usage(format!(
                    "--out {} is a folder; give a file path",
                    echo_path(path)
                )))
            }
            Ok(m) if !m.is_file() => {
                return Ok(OutputFile { sink: FileSink::Special { path: path.to_path_buf() } })
            }
            Ok(_) => {}
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => {}
            Err(e) => return Err(Error::io(path, e)),
        }
        let place = Place::resolve(path)?;
        let lock = Lock::take(&place)?;
        place.sweep();
        let staging = place.staging();
        Ok(OutputFile { sink: FileSink::Staged { _lock: lock, place, staging } })
    }

    /// The file this output replaces on commit (its folder resolved), or None for standard
    /// output and devices.
    pub fn target(&self) -> Option<PathBuf> {
        match &self.sink {
            FileSink::Staged { place, .. } => Some(place.target()),
            _ => None,
        }
    }

    /// True when this output is standard output.
    pub fn is_stdout(&self) -> bool {
        matches!(self.sink, FileSink::Stdout)
    }

    /// Writes the whole output with `fill` (to the temporary, or straight to standard
    /// output or a device).
    pub fn write_with(
        &self,
        fill: impl FnOnce(&mut dyn Write) -> std::io::Result<()>,
    ) -> Result<()> {
        let (path, file): (PathBuf, Box<dyn Write>) = match &self.sink {
            FileSink::Stdout => {
                let mut out = std::io::stdout().lock();
                fill(&mut out)
                    .and_then(|()| out.flush())
                    .map_err(|e| Error::io(Path::new("-"), e))?;
                return Ok(());
            }
            FileSink::Special { path } => {
                let f = fs::OpenOptions::new()
                    .write(true)
                    .open(path)
                    .map_err(|e| Error::io(path, e))?;
                (path.clone(), Box::new(f))
            }
            FileSink::Staged { staging, .. } => {
                let f = File::create(staging).map_err(|e| Error::io(staging, e))?;
                register(staging, Gone::File);
                (staging.clone(), Box::new(f))
            }
        };
        let mut w = std::io::BufWriter::new(file);
        fill(&mut w).and_then(|()| w.flush()).map_err(|e| Error::io(&path, e))
    }

    /// Renames the written temporary into place.
    pub fn commit(self) -> Result<()> {
        if let FileSink::Staged { place, staging, .. } = &self.sink {
            let target = place.target();
            let mut l = live();
            fs::rename(staging, &target).map_err(|e| Error::io(&place.shown, e))?;
            forget(&mut l, staging);
            for dir in &place.created {
                forget(&mut l, dir);
            }
        }
        let mut this = self;
        if let FileSink::Staged { place, .. } = &mut this.sink {
            place.created.clear();
        }
        Ok(())
    }
}

impl Drop for OutputFile {
    fn drop(&mut self) {
        if let FileSink::Staged { staging, .. } = &self.sink {
            if fs::symlink_metadata(staging).is_ok() {
                remove_any(staging);
            }
            unregister(staging);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn hidden(dir: &Path) -> Vec<String> {
        let mut v: Vec<String> = fs::read_dir(dir)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .filter(|n| n.starts_with('.'))
            .collect();
        v.sort();
        v
    }

    #[test]
    fn capped_reader_stops_at_the_cap_and_names_the_line_of_bad_utf8() {
        let tmp = tempfile::tempdir().unwrap();
        let p = tmp.path().join("n.toml");
        fs::write(&p, "a\nbb\n").unwrap();
        assert_eq!(read_text_capped(&p, 5, "noise file").unwrap(), "a\nbb\n");
        let e = read_text_capped(&p, 4, "noise file").unwrap_err().to_string();
        assert!(e.contains("larger than 4 bytes, the most a noise file may be"), "{e}");
        fs::write(&p, b"a\nb\xffc\n").unwrap();
        let e = read_text_capped(&p, 100, "noise file").unwrap_err().to_string();
        assert!(e.contains("line 2") && e.contains("byte 2 of the line"), "{e}");
        let e = read_text_capped(tmp.path(), 100, "noise file").unwrap_err().to_string();
        assert!(e.contains("is a folder"), "{e}");
    }

    #[test]
    fn only_running_processes_count_as_alive() {
        if Path::new("/proc/self/stat").exists() {
            assert!(pid_alive(std::process::id()));
            assert!(!pid_alive(4_000_000_000));
        }
    }

    #[test]
    fn sizes_read_naturally() {
        assert_eq!(size_text(64 << 20), "64 MiB");
        assert_eq!(size_text(16 << 30), "16 GiB");
        assert_eq!(size_text(1536), "1.5 KiB");
        assert_eq!(size_text(7), "7 bytes");
    }

    #[test]
    fn a_folder_commit_keeps_other_files_and_leaves_nothing_hidden() {
        let tmp = tempfile::tempdir().unwrap();
        let dir = tmp.path().join("out");
        fs::create_dir(&dir).unwrap();
        fs::write(dir.join("mine.txt"), "keep").unwrap();
        fs::write(dir.join("a.json"), "old").unwrap();
        let out = OutputDir::claim(&dir, FolderRule::Update).unwrap();
        out.write_files(&[("a.json".into(), b"new".to_vec()), ("s/b.csv".into(), b"x".to_vec())])
            .unwrap();
        assert_eq!(fs::read_to_string(dir.join("mine.txt")).unwrap(), "keep");
        assert_eq!(fs::read_to_string(dir.join("a.json")).unwrap(), "new");
        assert_eq!(fs::read_to_string(dir.join("s/b.csv")).unwrap(), "x");
        assert!(hidden(tmp.path()).is_empty(), "{:?}", hidden(tmp.path()));
    }

    #[test]
    fn an_existing_file_is_never_turned_into_a_folder() {
        let tmp = tempfile::tempdir().unwrap();
        let f = tmp.path().join("report");
        fs::write(&f, "precious").unwrap();
        let e = OutputDir::claim(&f, FolderRule::Update).err().unwrap().to_string();
        assert!(e.contains("is an existing file, not a folder"), "{e}");
        assert_eq!(fs::read_to_string(&f).unwrap(), "precious");
        assert!(hidden(tmp.path()).is_empty());
    }

    #[test]
    fn an_uncommitted_claim_leaves_no_trace() {
        let tmp = tempfile::tempdir().unwrap();
        let dir = tmp.path().join("new/deeper/out");
        {
            let out = OutputDir::claim(&dir, FolderRule::New).unwrap();
            fs::write(out.staging().join("x"), "partial").unwrap();
        }
        assert!(fs::read_dir(tmp.path()).unwrap().next().is_none());
        let f = tmp.path().join("sub/counts.csv");
        {
            let out = OutputFile::claim(&f).unwrap();
            out.write_with(|w| w.write_all(b"partial")).unwrap();
        }
        assert!(fs::read_dir(tmp.path()).unwrap().next().is_none());
    }

    #[test]
    fn a_second_claim_is_refused_while_the_first_holds_the_lock() {
        let tmp = tempfile::tempdir().unwrap();
        let dir = tmp.path().join("out");
        let first = OutputDir::claim(&dir, FolderRule::Update).unwrap();
        // Within one process the holder is this very command (another process is told
        // "being written by another slackmap run": tests/robustness.rs).
        let e = OutputDir::claim(&dir, FolderRule::Update).err().unwrap().to_string();
        assert!(e.contains("is named twice as an output of this command"), "{e}");
        drop(first);
        OutputDir::claim(&dir, FolderRule::Update).unwrap().write_files(&[]).unwrap();
        assert!(hidden(tmp.path()).is_empty());
    }

    #[test]
    fn leftovers_of_dead_runs_are_swept_and_a_set_aside_folder_restored() {
        let tmp = tempfile::tempdir().unwrap();
        // A pid far above any default pid_max: no such process.
        let dead = 4_000_000_000u32;
        let p = |n: &str| tmp.path().join(n);
        fs::create_dir(p(&format!(".out.slackmap-tmp-{dead}"))).unwrap();
        fs::create_dir(p(&format!(".out.partial-{dead}"))).unwrap();
        fs::write(p(&format!(".out.{dead}.tmp")), "x").unwrap();
        fs::write(p(".out.slackmap-lock"), "1\n").unwrap();
        // The target is missing and its previous version was set aside: put back.
        fs::create_dir(p(&format!(".out.slackmap-old-{dead}"))).unwrap();
        fs::write(p(&format!(".out.slackmap-old-{dead}/audit.json")), "{}").unwrap();
        // Not ours (another name) and a user's file set aside by an older version: kept.
        fs::write(p(&format!(".other.slackmap-tmp-{dead}")), "x").unwrap();
        let out = OutputDir::claim(&p("out"), FolderRule::Update).unwrap();
        out.write_files(&[("b".into(), b"1".to_vec())]).unwrap();
        assert_eq!(fs::read_to_string(p("out/audit.json")).unwrap(), "{}");
        assert_eq!(hidden(tmp.path()), vec![format!(".other.slackmap-tmp-{dead}")]);
    }

    #[test]
    fn a_file_output_replaces_the_target_only_on_commit() {
        let tmp = tempfile::tempdir().unwrap();
        let f = tmp.path().join("counts.csv");
        fs::write(&f, "old").unwrap();
        let out = OutputFile::claim(&f).unwrap();
        out.write_with(|w| w.write_all(b"new")).unwrap();
        assert_eq!(fs::read_to_string(&f).unwrap(), "old");
        out.commit().unwrap();
        assert_eq!(fs::read_to_string(&f).unwrap(), "new");
        assert!(hidden(tmp.path()).is_empty());
        let e = OutputFile::claim(tmp.path()).err().unwrap().to_string();
        assert!(e.contains("is a folder"), "{e}");
    }

    #[test]
    fn abandon_removes_live_temporaries() {
        let tmp = tempfile::tempdir().unwrap();
        let dir = tmp.path().join("out");
        let out = OutputDir::claim(&dir, FolderRule::New).unwrap();
        fs::write(out.staging().join("x"), "partial").unwrap();
        // Only this test's paths: other tests in this process have live outputs too.
        abandon_where(|p| p.starts_with(tmp.path()));
        assert!(fs::read_dir(tmp.path()).unwrap().next().is_none());
        drop(out);
    }
}
