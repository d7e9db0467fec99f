//! Output safety: no run of saltus ever leaves a partial or mixed output
//! under a final name, and no run ever overwrites its own input.
//!
//! Design:
//! - [`Output`] is where a per-row command writes: standard output (streamed
//!   as before), or a file written through an [`AtomicFile`], a temporary
//!   file in the target's own directory that is flushed, synced and renamed
//!   over the target by [`Output::commit`] only when the run has succeeded.
//!   Dropping it uncommitted (a fatal error, a write error such as a full
//!   disk) deletes the temporary file, so the old file stays as it was.
//!   A target that exists and is not a regular file (`/dev/null`, a FIFO) is
//!   written directly: it cannot be renamed over.
//! - [`OutputDir`] does the same for the directory of `risk`: every file is
//!   written into a hidden staging directory beside the target and
//!   [`OutputDir::commit`] swaps it into place in one step (Linux
//!   `renameat2(RENAME_EXCHANGE)`; elsewhere, or on file systems without it,
//!   rename the old one away, rename the new one in, delete the old one).
//!   An existing directory holding anything but a report's own files is
//!   refused rather than replaced.
//! - Both refuse an output that is the input book (same device and inode,
//!   whatever the spelling or hard link) or a directory holding it.
//! - A small global registry lists the temporary paths alive at any time.
//!   [`install_signal_cleanup`] starts a thread that, on SIGINT or SIGTERM,
//!   deletes them and exits with 128 + the signal number (130, 143). The
//!   registry lock is held while a temporary path is created and while it
//!   is renamed into place, so a signal either finds the temporary path and
//!   deletes it or finds the rename already done, never half of either.

use anyhow::{bail, Context, Result};
use std::fs::{self, File};
use std::io::{self, BufWriter, Write};
use std::path::{Path, PathBuf};
use std::sync::{Mutex, MutexGuard};

/// Suffix of every temporary file and staging directory (for recognising
/// leftovers of a run killed by SIGKILL or a power cut).
pub const TEMP_SUFFIX: &str = ".saltus-tmp";

/// Temporary paths alive now: (id, path, is a directory).
static LIVE: Mutex<Vec<(u64, PathBuf, bool)>> = Mutex::new(Vec::new());
static NEXT_ID: std::sync::atomic::AtomicU64 = std::sync::atomic::AtomicU64::new(0);

fn live() -> MutexGuard<'static, Vec<(u64, PathBuf, bool)>> {
    LIVE.lock().unwrap_or_else(|e| e.into_inner())
}

fn register(reg: &mut Vec<(u64, PathBuf, bool)>, path: &Path, dir: bool) -> u64 {
    let id = NEXT_ID.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
    reg.push((id, path.to_path_buf(), dir));
    id
}

fn unregister(reg: &mut Vec<(u64, PathBuf, bool)>, id: u64) {
    reg.retain(|(i, _, _)| *i != id);
}

/// Deletes every live temporary path (the signal handler's work).
fn remove_live(reg: &mut Vec<(u64, PathBuf, bool)>) {
    for (_, path, dir) in reg.drain(..) {
        let _ = if dir {
            fs::remove_dir_all(&path)
        } else {
            fs::remove_file(&path)
        };
    }
}

/// On SIGINT or SIGTERM: delete the live temporary files and staging
/// directories, then exit with 128 + the signal number. Final output names
/// are never touched by an interrupted run.
pub fn install_signal_cleanup() {
    #[cfg(unix)]
    {
        use signal_hook::consts::{SIGINT, SIGTERM};
        let mut signals = match signal_hook::iterator::Signals::new([SIGINT, SIGTERM]) {
            Ok(s) => s,
            Err(e) => {
                eprintln!("saltus: warning: cannot watch for interruptions: {e}");
                return;
            }
        };
        std::thread::spawn(move || {
            if let Some(sig) = signals.forever().next() {
                // Held until exit: no commit can start after this point.
                let mut reg = live();
                remove_live(&mut reg);
                let name = if sig == SIGINT { "SIGINT" } else { "SIGTERM" };
                eprintln!("saltus: interrupted ({name}): no output file was replaced");
                std::process::exit(128 + sig);
            }
        });
    }
}

/// True when two handles are the same regular file (device and inode,
/// whatever the path's spelling or hard link). A terminal or a pipe may be
/// both read and written: only files are compared.
fn same_regular_file(a: io::Result<same_file::Handle>, b: io::Result<same_file::Handle>) -> bool {
    match (a, b) {
        (Ok(a), Ok(b)) => a == b && a.as_file().metadata().is_ok_and(|m| m.is_file()),
        _ => false,
    }
}

/// Refuses an output file that is the input book (or, for a book read from
/// standard input, the file standard input comes from).
fn refuse_input_as_output(out: &Path, input: &Path) -> Result<()> {
    let book = if input.as_os_str() == "-" {
        same_file::Handle::stdin()
    } else {
        same_file::Handle::from_path(input)
    };
    let clash = same_regular_file(book, same_file::Handle::from_path(out));
    if clash && input.as_os_str() == "-" {
        bail!(
            "refusing to write {}: standard input reads the book from that file; choose another output path",
            out.display()
        );
    }
    if clash {
        bail!(
            "refusing to write {}: it is the input book {} (the same file); choose another output path",
            out.display(),
            input.display()
        );
    }
    Ok(())
}

/// A file written under a temporary name in the target's directory and
/// renamed over the target by [`AtomicFile::commit`]; deleted if dropped
/// uncommitted.
pub struct AtomicFile {
    tmp: Option<tempfile::NamedTempFile>,
    target: PathBuf,
    id: u64,
}

impl AtomicFile {
    /// Creates the temporary file beside `target` (which need not exist).
    /// An existing target's permissions are carried over.
    pub fn create(target: &Path) -> Result<Self> {
        let dir = match target.parent() {
            Some(p) if !p.as_os_str().is_empty() => p,
            _ => Path::new("."),
        };
        let name = target
            .file_name()
            .with_context(|| format!("cannot write {}: not a file name", target.display()))?;
        let prefix = format!(".{}.", name.to_string_lossy());
        let old_perms = fs::metadata(target).ok().map(|m| m.permissions());
        let mut builder = tempfile::Builder::new();
        builder.prefix(&prefix).suffix(TEMP_SUFFIX);
        #[cfg(unix)]
        {
            use std::os::unix::fs::PermissionsExt;
            // A new file gets the usual 0666 less the umask, not 0600.
            builder.permissions(fs::Permissions::from_mode(0o666));
        }
        let mut reg = live();
        let tmp = builder.tempfile_in(dir).with_context(|| {
            format!(
                "cannot create a temporary file in {} (outputs are written to a temporary file and renamed into place)",
                dir.display()
            )
        })?;
        if let Some(p) = old_perms {
            let _ = tmp.as_file().set_permissions(p);
        }
        let id = register(&mut reg, tmp.path(), false);
        drop(reg);
        Ok(AtomicFile {
            tmp: Some(tmp),
            target: target.to_path_buf(),
            id,
        })
    }

    /// Syncs the data and renames the temporary file over the target.
    pub fn commit(mut self) -> Result<()> {
        let tmp = self.tmp.take().expect("not yet committed");
        let mut reg = live();
        unregister(&mut reg, self.id);
        let result = tmp
            .as_file()
            .sync_all()
            .map_err(anyhow::Error::from)
            .and_then(|()| {
                tmp.persist(&self.target)
                    .map(drop)
                    .map_err(|e| e.error.into())
            });
        drop(reg);
        result.with_context(|| {
            format!(
                "cannot write {} (it is left as it was)",
                self.target.display()
            )
        })?;
        sync_parent(&self.target);
        Ok(())
    }
}

impl Write for AtomicFile {
    fn write(&mut self, buf: &[u8]) -> io::Result<usize> {
        self.tmp.as_mut().expect("not yet committed").write(buf)
    }
    fn flush(&mut self) -> io::Result<()> {
        self.tmp.as_mut().expect("not yet committed").flush()
    }
}

impl Drop for AtomicFile {
    fn drop(&mut self) {
        if let Some(tmp) = self.tmp.take() {
            let mut reg = live();
            drop(tmp); // deletes the temporary file
            unregister(&mut reg, self.id);
        }
    }
}

/// Makes a rename durable: syncs the directory holding `path` (best effort).
fn sync_parent(path: &Path) {
    #[cfg(unix)]
    if let Some(dir) = path.parent() {
        let dir = if dir.as_os_str().is_empty() {
            Path::new(".")
        } else {
            dir
        };
        if let Ok(d) = File::open(dir) {
            let _ = d.sync_all();
        }
    }
}

enum Sink {
    Stdout(BufWriter<io::Stdout>),
    Atomic(BufWriter<AtomicFile>),
    Direct(BufWriter<File>),
}

/// Where a per-row command writes: standard output, or a file replaced
/// atomically when the run succeeds ([`Output::commit`]). Write errors name
/// the destination.
pub struct Output {
    sink: Sink,
    name: String,
    atomic: bool,
}

impl Output {
    /// Opens `path` (`-` or none: standard output) for the results of
    /// reading `input`. Refuses a path that is the input book.
    pub fn open(path: Option<&Path>, input: &Path) -> Result<Output> {
        // Small buffers: the pipeline writes whole chunks, which then bypass
        // the buffer instead of being copied through it.
        const BUF: usize = 1 << 16;
        let path = match path {
            Some(p) if p.as_os_str() != "-" => p,
            _ => {
                if input.as_os_str() != "-"
                    && same_regular_file(
                        same_file::Handle::stdout(),
                        same_file::Handle::from_path(input),
                    )
                {
                    bail!(
                        "refusing to write standard output: it is the input book {}",
                        input.display()
                    );
                }
                return Ok(Output {
                    sink: Sink::Stdout(BufWriter::with_capacity(BUF, io::stdout())),
                    name: "standard output".into(),
                    atomic: false,
                });
            }
        };
        refuse_input_as_output(path, input)?;
        // A symbolic link is followed: the file it names is replaced.
        let target = match fs::symlink_metadata(path) {
            Ok(m) if m.file_type().is_symlink() => fs::canonicalize(path).unwrap_or(path.into()),
            _ => path.to_path_buf(),
        };
        let name = path.display().to_string();
        match fs::metadata(&target) {
            Ok(m) if m.is_dir() => bail!("cannot write {name}: it is a directory"),
            Ok(m) if !m.is_file() => {
                let f = fs::OpenOptions::new()
                    .write(true)
                    .open(&target)
                    .with_context(|| format!("cannot open {name}"))?;
                Ok(Output {
                    sink: Sink::Direct(BufWriter::with_capacity(BUF, f)),
                    name,
                    atomic: false,
                })
            }
            _ => Ok(Output {
                sink: Sink::Atomic(BufWriter::with_capacity(BUF, AtomicFile::create(&target)?)),
                name,
                atomic: true,
            }),
        }
    }

    /// Finishes the output: flushes it and, for a file, renames it into
    /// place. Until this returns, an existing file of that name is untouched.
    pub fn commit(self) -> Result<()> {
        let name = self.name;
        match self.sink {
            Sink::Stdout(mut w) => w.flush().with_context(|| format!("cannot write {name}")),
            Sink::Direct(mut w) => w.flush().with_context(|| format!("cannot write {name}")),
            Sink::Atomic(w) => {
                let file = w
                    .into_inner()
                    .map_err(|e| e.into_error())
                    .with_context(|| format!("cannot write {name} (it is left as it was)"))?;
                file.commit()
            }
        }
    }

    fn annotate(&self, e: io::Error) -> io::Error {
        if e.kind() == io::ErrorKind::BrokenPipe {
            return e;
        }
        let kept = if self.atomic {
            " (it is left as it was)"
        } else {
            ""
        };
        io::Error::new(e.kind(), format!("cannot write {}{kept}: {e}", self.name))
    }
}

impl Write for Output {
    fn write(&mut self, buf: &[u8]) -> io::Result<usize> {
        let r = match &mut self.sink {
            Sink::Stdout(w) => w.write(buf),
            Sink::Atomic(w) => w.write(buf),
            Sink::Direct(w) => w.write(buf),
        };
        r.map_err(|e| self.annotate(e))
    }
    fn write_all(&mut self, buf: &[u8]) -> io::Result<()> {
        let r = match &mut self.sink {
            Sink::Stdout(w) => w.write_all(buf),
            Sink::Atomic(w) => w.write_all(buf),
            Sink::Direct(w) => w.write_all(buf),
        };
        r.map_err(|e| self.annotate(e))
    }
    fn flush(&mut self) -> io::Result<()> {
        let r = match &mut self.sink {
            Sink::Stdout(w) => w.flush(),
            Sink::Atomic(w) => w.flush(),
            Sink::Direct(w) => w.flush(),
        };
        r.map_err(|e| self.annotate(e))
    }
}

/// A directory of output files written into a hidden staging directory
/// beside the target and swapped into place by [`OutputDir::commit`], so
/// the target is the old directory or the new one, never a mixture.
pub struct OutputDir {
    staging: Option<tempfile::TempDir>,
    target: PathBuf,
    id: u64,
}

impl OutputDir {
    /// Prepares to replace `target` with a directory of the files named in
    /// `own_files`, written from `input`. Refuses a target that is not a
    /// directory, holds the input book, or holds anything else than
    /// `own_files` (it would be lost in the swap).
    pub fn stage(target: &Path, input: &Path, own_files: &[&str]) -> Result<Self> {
        let shown = target.display().to_string();
        let exists = fs::symlink_metadata(target).is_ok();
        // A symbolic link is followed: the directory it names is replaced.
        let target = if exists {
            fs::canonicalize(target).with_context(|| format!("cannot read {shown}"))?
        } else {
            target.to_path_buf()
        };
        if exists {
            if !target.is_dir() {
                bail!("cannot write the report into {shown}: it is not a directory");
            }
            if input.as_os_str() != "-" {
                if let Ok(book) = fs::canonicalize(input) {
                    if book.starts_with(&target) {
                        bail!(
                            "refusing to write the report into {shown}: it holds the input book {} (the directory is replaced as a whole); choose another output directory",
                            input.display()
                        );
                    }
                }
            }
            let entries = fs::read_dir(&target).with_context(|| format!("cannot read {shown}"))?;
            for entry in entries {
                let entry = entry.with_context(|| format!("cannot read {shown}"))?;
                let name = entry.file_name();
                let own = own_files.iter().any(|f| name == *f)
                    && entry.file_type().is_ok_and(|t| t.is_file());
                if !own {
                    bail!(
                        "refusing to replace {shown}: it holds {}, which is not a file of a saltus report (the directory is replaced as a whole); choose a new or empty directory",
                        name.to_string_lossy()
                    );
                }
            }
        }
        let name = target
            .file_name()
            .with_context(|| format!("cannot write the report into {shown}: not a directory name"))?
            .to_string_lossy()
            .into_owned();
        let parent = match target.parent() {
            Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
            _ => PathBuf::from("."),
        };
        fs::create_dir_all(&parent)
            .with_context(|| format!("cannot create {}", parent.display()))?;
        let prefix = format!(".{name}.");
        let mut builder = tempfile::Builder::new();
        builder.prefix(&prefix).suffix(TEMP_SUFFIX);
        #[cfg(unix)]
        {
            use std::os::unix::fs::PermissionsExt;
            let mode = if exists {
                fs::metadata(&target)
                    .map(|m| m.permissions().mode())
                    .unwrap_or(0o777)
            } else {
                0o777 // less the umask, as for a new directory
            };
            builder.permissions(fs::Permissions::from_mode(mode & 0o7777));
        }
        let mut reg = live();
        let staging = builder.tempdir_in(&parent).with_context(|| {
            format!(
                "cannot create a staging directory in {} (the report is written there and swapped into place)",
                parent.display()
            )
        })?;
        let id = register(&mut reg, staging.path(), true);
        drop(reg);
        Ok(OutputDir {
            staging: Some(staging),
            target,
            id,
        })
    }

    /// The directory to write the files into (the staging directory).
    pub fn path(&self) -> &Path {
        self.staging.as_ref().expect("not yet committed").path()
    }

    /// Syncs every file and swaps the staging directory into place; the old
    /// directory, if any, is deleted.
    pub fn commit(mut self) -> Result<()> {
        let staging = self.staging.take().expect("not yet committed");
        let shown = self.target.display().to_string();
        let fail = |e: io::Error, what: &str| {
            anyhow::Error::from(e).context(format!("cannot {what} {shown} (it is left as it was)"))
        };
        sync_tree(staging.path()).map_err(|e| fail(e, "write the report into"))?;
        let mut reg = live();
        unregister(&mut reg, self.id);
        let new = staging.keep();
        let result = swap_into_place(&new, &self.target);
        if result.is_err() {
            let _ = fs::remove_dir_all(&new);
        }
        drop(reg);
        result.map_err(|e| fail(e, "replace"))?;
        sync_parent(&self.target);
        Ok(())
    }
}

impl Drop for OutputDir {
    fn drop(&mut self) {
        if let Some(staging) = self.staging.take() {
            let mut reg = live();
            drop(staging); // deletes the staging directory
            unregister(&mut reg, self.id);
        }
    }
}

/// Syncs the files of `dir` and the directory itself.
fn sync_tree(dir: &Path) -> io::Result<()> {
    for entry in fs::read_dir(dir)? {
        let entry = entry?;
        if entry.file_type()?.is_file() {
            File::open(entry.path())?.sync_all()?;
        }
    }
    #[cfg(unix)]
    File::open(dir)?.sync_all()?;
    Ok(())
}

/// Puts directory `new` at `target`; an old `target` is deleted. Called
/// with the registry locked (a signal waits until the swap is done).
fn swap_into_place(new: &Path, target: &Path) -> io::Result<()> {
    if fs::symlink_metadata(target).is_err() {
        return fs::rename(new, target);
    }
    #[cfg(target_os = "linux")]
    {
        use rustix::fs::{renameat_with, RenameFlags, CWD};
        match renameat_with(CWD, new, CWD, target, RenameFlags::EXCHANGE) {
            // `new` now names the old directory.
            Ok(()) => {
                let _ = fs::remove_dir_all(new);
                return Ok(());
            }
            Err(e)
                if e == rustix::io::Errno::INVAL
                    || e == rustix::io::Errno::NOSYS
                    || e == rustix::io::Errno::NOTSUP =>
            {
                // The file system cannot exchange: fall through.
            }
            Err(e) => return Err(e.into()),
        }
    }
    swap_by_renames(new, target)
}

/// The portable swap: rename the old directory away, the new one in, and
/// delete the old one (the old one is put back if the second rename fails).
fn swap_by_renames(new: &Path, target: &Path) -> io::Result<()> {
    let mut old = target.as_os_str().to_owned();
    old.push(format!(".{}.old{TEMP_SUFFIX}", std::process::id()));
    let old = PathBuf::from(old);
    fs::rename(target, &old)?;
    if let Err(e) = fs::rename(new, target) {
        let _ = fs::rename(&old, target);
        return Err(e);
    }
    let _ = fs::remove_dir_all(&old);
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A writer that fails like a full disk after `room` bytes.
    struct FullDisk {
        inner: Output,
        room: usize,
    }

    impl Write for FullDisk {
        fn write(&mut self, buf: &[u8]) -> io::Result<usize> {
            if buf.len() > self.room {
                return Err(io::Error::from_raw_os_error(28)); // ENOSPC
            }
            self.room -= buf.len();
            self.inner.write(buf)
        }
        fn flush(&mut self) -> io::Result<()> {
            self.inner.flush()
        }
    }

    fn names(dir: &Path) -> Vec<String> {
        let mut v: Vec<String> = fs::read_dir(dir)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        v.sort();
        v
    }

    #[test]
    fn atomic_file_is_replaced_only_on_commit() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("out.csv");
        fs::write(&target, "old\n").unwrap();
        let mut out = Output::open(Some(&target), Path::new("-")).unwrap();
        out.write_all(b"new\n").unwrap();
        out.flush().unwrap();
        assert_eq!(fs::read(&target).unwrap(), b"old\n");
        assert_eq!(
            names(dir.path()).len(),
            2,
            "the temporary file is beside the target"
        );
        out.commit().unwrap();
        assert_eq!(fs::read(&target).unwrap(), b"new\n");
        assert_eq!(names(dir.path()), ["out.csv"]);
    }

    #[test]
    fn write_failure_keeps_the_old_file_and_removes_the_temporary() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("out.csv");
        fs::write(&target, "old\n").unwrap();
        let mut w = FullDisk {
            inner: Output::open(Some(&target), Path::new("-")).unwrap(),
            room: 1 << 20,
        };
        let chunk = vec![b'x'; 1 << 16];
        let err = loop {
            if let Err(e) = w.write_all(&chunk) {
                break e;
            }
        };
        assert_eq!(err.raw_os_error(), Some(28));
        drop(w); // what a command does on the error: give up the output
        assert_eq!(fs::read(&target).unwrap(), b"old\n");
        assert_eq!(names(dir.path()), ["out.csv"]);
    }

    #[test]
    fn output_dir_swaps_whole_directories() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("report");
        fs::create_dir(&target).unwrap();
        fs::write(target.join("a.csv"), "old a").unwrap();
        fs::write(target.join("b.csv"), "old b").unwrap();
        // A run that fails after writing part of its files changes nothing.
        let staged = OutputDir::stage(&target, Path::new("-"), &["a.csv", "b.csv"]).unwrap();
        fs::write(staged.path().join("a.csv"), "new a").unwrap();
        drop(staged);
        assert_eq!(fs::read_to_string(target.join("a.csv")).unwrap(), "old a");
        assert_eq!(names(dir.path()), ["report"]);
        // A complete run replaces the directory as a whole.
        let staged = OutputDir::stage(&target, Path::new("-"), &["a.csv", "b.csv"]).unwrap();
        fs::write(staged.path().join("a.csv"), "new a").unwrap();
        staged.commit().unwrap();
        assert_eq!(names(&target), ["a.csv"]);
        assert_eq!(fs::read_to_string(target.join("a.csv")).unwrap(), "new a");
        assert_eq!(names(dir.path()), ["report"]);
        // A foreign file is never swapped away.
        fs::write(target.join("notes.txt"), "mine").unwrap();
        let e = OutputDir::stage(&target, Path::new("-"), &["a.csv", "b.csv"])
            .err()
            .expect("refused");
        assert!(e.to_string().contains("notes.txt"), "{e}");
    }

    #[test]
    fn fallback_swap_replaces_an_existing_directory() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("report");
        let new = dir.path().join("staging");
        fs::create_dir(&target).unwrap();
        fs::write(target.join("a.csv"), "old").unwrap();
        fs::create_dir(&new).unwrap();
        fs::write(new.join("a.csv"), "new").unwrap();
        swap_by_renames(&new, &target).unwrap();
        assert_eq!(fs::read_to_string(target.join("a.csv")).unwrap(), "new");
        assert_eq!(names(dir.path()), ["report"]);
    }
}
