//! Output files that never destroy an input: [`refuse_protected`] refuses an output path that is
//! the plant database (or its `-wal`/`-shm`), its configuration or an input of the same command,
//! compared as files (canonical path, and device + inode where both exist, so `./plant.db`, an
//! absolute path, a symbolic link and a hard link are all the same file); [`AtomicFile`] and
//! [`write_atomic`] write to a temporary name in the same directory and rename it over the target
//! only when everything was written, so a failure leaves no half file and the old file intact.

use std::fs::File;
use std::io::{BufWriter, Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};

use crate::{Error, Result};

/// A file an output must not replace, with what it is (for the message).
#[derive(Debug, Clone)]
pub struct Protected {
    /// The file.
    pub path: PathBuf,
    /// What it is: "the plant database", "the plant configuration", "an input of this command".
    pub what: String,
}

impl Protected {
    /// A protected file.
    pub fn new(path: impl Into<PathBuf>, what: impl Into<String>) -> Self {
        Protected {
            path: path.into(),
            what: what.into(),
        }
    }

    /// The plant database with its `-wal` and `-shm` files, and the configuration file.
    pub fn plant(database: &Path, config: &Path) -> Vec<Protected> {
        let mut v = vec![Protected::new(database, "the plant database")];
        for suffix in ["-wal", "-shm", "-journal"] {
            let mut name = database.as_os_str().to_owned();
            name.push(suffix);
            v.push(Protected::new(
                PathBuf::from(name),
                format!("a file of the plant database ({suffix})"),
            ));
        }
        v.push(Protected::new(config, "the plant configuration"));
        v
    }
}

/// The file a path names once `.`/`..` and symbolic links are resolved: the canonical path when
/// it exists, else its canonical directory joined with its name (an output not written yet).
fn resolved(path: &Path) -> Option<PathBuf> {
    if let Ok(p) = path.canonicalize() {
        return Some(p);
    }
    let name = path.file_name()?;
    let parent = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    Some(parent.canonicalize().ok()?.join(name))
}

#[cfg(unix)]
fn same_inode(a: &Path, b: &Path) -> bool {
    use std::os::unix::fs::MetadataExt;
    match (std::fs::metadata(a), std::fs::metadata(b)) {
        (Ok(a), Ok(b)) => a.dev() == b.dev() && a.ino() == b.ino(),
        _ => false,
    }
}

#[cfg(not(unix))]
fn same_inode(_: &Path, _: &Path) -> bool {
    false
}

/// Whether `a` and `b` name the same file (see the module docs).
pub fn same_file(a: &Path, b: &Path) -> bool {
    if same_inode(a, b) {
        return true;
    }
    match (resolved(a), resolved(b)) {
        (Some(a), Some(b)) => a == b,
        _ => a == b,
    }
}

/// Refuses `out` (given with option `flag`, e.g. "--out") when it is one of `protected`.
pub fn refuse_protected(out: &Path, flag: &str, protected: &[Protected]) -> Result<()> {
    if let Some(p) = protected.iter().find(|p| same_file(out, &p.path)) {
        return Err(Error::Usage(format!(
            "{flag} {} is {} ({}); nothing was written: choose another file",
            out.display(),
            p.what,
            p.path.display()
        )));
    }
    Ok(())
}

/// Refuses an output path whose extension is not one of `extensions` (lowercase, without dot).
pub fn require_extension(out: &Path, flag: &str, extensions: &[&str]) -> Result<()> {
    let ok = out
        .extension()
        .and_then(|e| e.to_str())
        .is_some_and(|e| extensions.iter().any(|x| e.eq_ignore_ascii_case(x)));
    if ok {
        return Ok(());
    }
    let list: Vec<String> = extensions.iter().map(|e| format!(".{e}")).collect();
    Err(Error::Usage(format!(
        "{flag} {}: the file name must end in {}",
        out.display(),
        list.join(" or ")
    )))
}

/// A file being written under a temporary name beside its target (`.NAME.PID.tmp`); [`commit`]
/// renames it over the target. Dropped without `commit`, the temporary file is removed and the
/// target is untouched.
///
/// [`commit`]: AtomicFile::commit
#[derive(Debug)]
pub struct AtomicFile {
    target: PathBuf,
    temp: PathBuf,
    writer: Option<BufWriter<File>>,
}

/// The temporary name beside `target` that [`AtomicFile`] and `db backup` write to.
pub fn temp_name(target: &Path) -> PathBuf {
    let name = target
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "output".to_string());
    target.with_file_name(format!(".{name}.{}.tmp", std::process::id()))
}

impl AtomicFile {
    /// Creates the temporary file for `target`.
    pub fn create(target: &Path) -> Result<AtomicFile> {
        let temp = temp_name(target);
        let file = File::create(&temp).map_err(|e| Error::io(target, e))?;
        Ok(AtomicFile {
            target: target.to_path_buf(),
            temp,
            writer: Some(BufWriter::with_capacity(1 << 16, file)),
        })
    }

    /// The target path.
    pub fn path(&self) -> &Path {
        &self.target
    }

    /// How many bytes have been written so far (a point to go back to with
    /// [`AtomicFile::truncate_to`]).
    pub fn position(&mut self) -> Result<u64> {
        let target = self.target.clone();
        let w = self
            .writer
            .as_mut()
            .expect("an uncommitted file has its writer");
        w.flush().map_err(|e| Error::io(&target, e))?;
        w.get_mut()
            .stream_position()
            .map_err(|e| Error::io(&target, e))
    }

    /// Drops everything written after `len` bytes (what [`AtomicFile::position`] returned), so
    /// a part that turned out not to count (a file whose import failed) leaves no trace.
    pub fn truncate_to(&mut self, len: u64) -> Result<()> {
        let target = self.target.clone();
        let w = self
            .writer
            .as_mut()
            .expect("an uncommitted file has its writer");
        w.flush().map_err(|e| Error::io(&target, e))?;
        let file = w.get_mut();
        file.set_len(len).map_err(|e| Error::io(&target, e))?;
        file.seek(SeekFrom::Start(len))
            .map(|_| ())
            .map_err(|e| Error::io(&target, e))
    }

    /// Flushes, syncs and renames the temporary file over the target.
    pub fn commit(mut self) -> Result<()> {
        let target = self.target.clone();
        let writer = self
            .writer
            .take()
            .expect("an uncommitted file has its writer");
        let file = writer
            .into_inner()
            .map_err(|e| Error::io(&target, e.into_error()))?;
        file.sync_all().map_err(|e| Error::io(&target, e))?;
        drop(file);
        std::fs::rename(&self.temp, &target).map_err(|e| Error::io(&target, e))
    }
}

impl Write for AtomicFile {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        match &mut self.writer {
            Some(w) => w.write(buf),
            None => Err(std::io::Error::other("the file was committed")),
        }
    }

    fn flush(&mut self) -> std::io::Result<()> {
        match &mut self.writer {
            Some(w) => w.flush(),
            None => Ok(()),
        }
    }
}

impl Drop for AtomicFile {
    fn drop(&mut self) {
        if self.writer.take().is_some() {
            let _ = std::fs::remove_file(&self.temp);
        }
    }
}

/// Writes `bytes` to `path` through a temporary name (see [`AtomicFile`]).
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<()> {
    let mut file = AtomicFile::create(path)?;
    file.write_all(bytes).map_err(|e| Error::io(path, e))?;
    file.commit()
}

/// Writes a CSV file through a temporary name (see [`AtomicFile`]): the header, then one record
/// per row, quoted where a cell needs it.
pub fn write_csv<R>(path: &Path, header: &[&str], rows: impl IntoIterator<Item = R>) -> Result<()>
where
    R: IntoIterator<Item = String>,
{
    let mut w = csv::Writer::from_writer(AtomicFile::create(path)?);
    let io = |e: csv::Error| Error::Io {
        path: path.to_path_buf(),
        source: std::io::Error::other(e),
    };
    w.write_record(header).map_err(io)?;
    for row in rows {
        w.write_record(row).map_err(io)?;
    }
    w.flush().map_err(|e| Error::io(path, e))?;
    w.into_inner()
        .map_err(|e| Error::io(path, e.into_error()))?
        .commit()
}

/// A number as a CSV cell: the shortest text that reads back as the same double; empty when
/// the value is unavailable.
pub fn csv_number(x: Option<f64>) -> String {
    x.map_or(String::new(), |v| format!("{v:?}"))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn relative_absolute_and_linked_paths_are_the_same_file() {
        let dir = std::env::temp_dir().join(format!("samewise-output-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let db = dir.join("plant.db");
        std::fs::write(&db, b"x").unwrap();
        let dotted = dir.join(".").join("plant.db");
        assert!(same_file(&db, &dotted));
        let linked = dir.join("hard.db");
        let _ = std::fs::remove_file(&linked);
        std::fs::hard_link(&db, &linked).unwrap();
        assert!(same_file(&linked, &db));
        // Not yet written: compared by directory and name.
        assert!(same_file(
            &dir.join("new.html"),
            &dir.join(".").join("new.html")
        ));
        assert!(!same_file(&dir.join("new.html"), &db));
        let wal = Protected::plant(&db, &dir.join("plant.toml"));
        let err = refuse_protected(&dir.join("plant.db-wal"), "--out", &wal).unwrap_err();
        assert!(err.to_string().contains("plant database"), "{err}");
        assert!(refuse_protected(&dir.join("review.html"), "--out", &wal).is_ok());
        std::fs::remove_dir_all(&dir).unwrap();
    }

    #[test]
    fn a_failed_write_leaves_the_old_file() {
        let dir = std::env::temp_dir().join(format!("samewise-atomic-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let target = dir.join("out.csv");
        std::fs::write(&target, b"old").unwrap();
        {
            let mut f = AtomicFile::create(&target).unwrap();
            f.write_all(b"half").unwrap();
            // dropped without commit
        }
        assert_eq!(std::fs::read(&target).unwrap(), b"old");
        assert_eq!(
            std::fs::read_dir(&dir).unwrap().count(),
            1,
            "no temporary left"
        );
        write_atomic(&target, b"new").unwrap();
        assert_eq!(std::fs::read(&target).unwrap(), b"new");
        std::fs::remove_dir_all(&dir).unwrap();
    }
}
