//! Every file the simulator reads or writes goes through here: bounded reads
//! of input files (a size cap, named in the message, so an endless file such
//! as `/dev/zero` cannot exhaust memory), atomic output (each output is
//! written to a temporary file in the same folder and renamed into place
//! only once every output of the command exists, so a failed run leaves the
//! previous report whole), and the conflicts refused before a run starts
//! (an output that would replace an input, an output folder that is a file,
//! two outputs that map to one path).

use std::fmt;
use std::io::Read as _;
use std::path::{Path, PathBuf};

/// Largest input file read, bytes (board files, scenarios, tables). The
/// shipped files are a few kB; 4 MiB leaves room for long tables and
/// comments while an endless or binary file is refused at once.
pub const MAX_INPUT_BYTES: u64 = 4 * 1024 * 1024;

/// Why a file could not be read or written.
#[derive(Debug)]
pub enum FileError {
    /// The file could not be opened or read.
    Read {
        /// Key or option the path came from (`board`, `temperature.table_csv`,
        /// `SCENARIO`, ...).
        origin: String,
        /// The file.
        path: PathBuf,
        /// The system's reason.
        source: std::io::Error,
    },
    /// The file is larger than [`MAX_INPUT_BYTES`] (or endless).
    TooLarge {
        /// Key or option the path came from.
        origin: String,
        /// The file.
        path: PathBuf,
        /// The cap, bytes.
        cap: u64,
    },
    /// The file is not UTF-8 text.
    NotText {
        /// Key or option the path came from.
        origin: String,
        /// The file.
        path: PathBuf,
    },
    /// An output could not be written or moved into place.
    Write {
        /// The output.
        path: PathBuf,
        /// The system's reason.
        source: std::io::Error,
    },
    /// An output conflicts with an input or another output; nothing was run.
    Conflict {
        /// Option the output path came from (`--out`).
        origin: String,
        /// The output path.
        path: PathBuf,
        /// What it conflicts with.
        why: String,
    },
}

impl fmt::Display for FileError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            FileError::Read {
                origin,
                path,
                source,
            } => write!(f, "{origin}: {}: {source}", path.display()),
            FileError::TooLarge { origin, path, cap } => write!(
                f,
                "{origin}: {}: larger than the {cap} bytes an input file may have (or endless); \
                 give a regular file below that size",
                path.display()
            ),
            FileError::NotText { origin, path } => {
                write!(f, "{origin}: {}: not UTF-8 text", path.display())
            }
            FileError::Write { path, source } => write!(f, "{}: {source}", path.display()),
            FileError::Conflict { origin, path, why } => {
                write!(f, "{origin} {}: {why}; nothing was run", path.display())
            }
        }
    }
}

impl FileError {
    /// The message without the key or option it came from, for a caller
    /// that already names the key.
    pub fn detail(&self) -> String {
        let full = self.to_string();
        match self {
            FileError::Read { origin, .. }
            | FileError::TooLarge { origin, .. }
            | FileError::NotText { origin, .. } => full
                .strip_prefix(&format!("{origin}: "))
                .unwrap_or(&full)
                .to_string(),
            _ => full,
        }
    }
}

impl std::error::Error for FileError {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            FileError::Read { source, .. } | FileError::Write { source, .. } => Some(source),
            _ => None,
        }
    }
}

/// Read a text file of at most [`MAX_INPUT_BYTES`]; `origin` names the key
/// or option the path came from, for the message.
pub fn read_text(path: &Path, origin: &str) -> Result<String, FileError> {
    read_text_capped(path, origin, MAX_INPUT_BYTES)
}

/// [`read_text`] with a chosen cap (tests).
pub fn read_text_capped(path: &Path, origin: &str, cap: u64) -> Result<String, FileError> {
    let read_err = |source| FileError::Read {
        origin: origin.to_string(),
        path: path.to_path_buf(),
        source,
    };
    let file = std::fs::File::open(path).map_err(read_err)?;
    if file.metadata().map_err(read_err)?.is_dir() {
        return Err(read_err(std::io::Error::new(
            std::io::ErrorKind::IsADirectory,
            "is a folder, not a file",
        )));
    }
    let mut bytes = Vec::new();
    // Read one byte past the cap: an endless file stops there.
    file.take(cap + 1)
        .read_to_end(&mut bytes)
        .map_err(read_err)?;
    if bytes.len() as u64 > cap {
        return Err(FileError::TooLarge {
            origin: origin.to_string(),
            path: path.to_path_buf(),
            cap,
        });
    }
    String::from_utf8(bytes).map_err(|_| FileError::NotText {
        origin: origin.to_string(),
        path: path.to_path_buf(),
    })
}

/// Write one output file atomically: a temporary file in the same folder,
/// then a rename over `path`.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<(), FileError> {
    let tmp = temp_beside(path);
    let werr = |source| FileError::Write {
        path: path.to_path_buf(),
        source,
    };
    if let Err(e) = std::fs::write(&tmp, bytes) {
        let _ = std::fs::remove_file(&tmp);
        return Err(werr(e));
    }
    std::fs::rename(&tmp, path).map_err(|e| {
        let _ = std::fs::remove_file(&tmp);
        werr(e)
    })
}

/// A hidden temporary name in the folder of `path`.
fn temp_beside(path: &Path) -> PathBuf {
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "out".into());
    path.with_file_name(format!(".{name}.tmp-{}", std::process::id()))
}

/// The outputs of one command, written into a hidden staging folder inside
/// the output folder and moved into place by [`Staging::commit`] once they
/// all exist. Dropped without a commit, the staging folder is removed and
/// the output folder keeps what it held before.
#[derive(Debug)]
pub struct Staging {
    out: PathBuf,
    tmp: PathBuf,
    committed: bool,
}

impl Staging {
    /// Stage outputs for the folder `out` (created if missing).
    pub fn new(out: &Path) -> Result<Self, FileError> {
        let werr = |source| FileError::Write {
            path: out.to_path_buf(),
            source,
        };
        std::fs::create_dir_all(out).map_err(werr)?;
        let tmp = out.join(format!(".diodestat-staging-{}", std::process::id()));
        if tmp.exists() {
            std::fs::remove_dir_all(&tmp).map_err(werr)?;
        }
        std::fs::create_dir_all(&tmp).map_err(werr)?;
        Ok(Staging {
            out: out.to_path_buf(),
            tmp,
            committed: false,
        })
    }

    /// Where to write the output that will end up at `out/rel`.
    pub fn path(&self, rel: &str) -> PathBuf {
        self.tmp.join(rel)
    }

    /// The staging folder (for writers that fill a folder).
    pub fn dir(&self) -> &Path {
        &self.tmp
    }

    /// The final path of `rel`.
    pub fn final_path(&self, rel: &str) -> PathBuf {
        self.out.join(rel)
    }

    /// Move every staged file into the output folder (each by a rename in
    /// the same file system) and remove the staging folder.
    pub fn commit(mut self) -> Result<(), FileError> {
        let mut files = Vec::new();
        collect_files(&self.tmp, &mut files).map_err(|source| FileError::Write {
            path: self.tmp.clone(),
            source,
        })?;
        // Refuse before moving anything, so a refusal leaves no mixed set.
        for f in &files {
            let rel = f.strip_prefix(&self.tmp).unwrap_or(f);
            let dest = self.out.join(rel);
            if dest.is_dir() {
                return Err(FileError::Write {
                    path: dest,
                    source: std::io::Error::new(
                        std::io::ErrorKind::IsADirectory,
                        "a folder stands where this output goes; nothing was replaced",
                    ),
                });
            }
        }
        for f in files {
            let rel = f.strip_prefix(&self.tmp).unwrap_or(&f).to_path_buf();
            let dest = self.out.join(&rel);
            let werr = |source| FileError::Write {
                path: dest.clone(),
                source,
            };
            if let Some(parent) = dest.parent() {
                std::fs::create_dir_all(parent).map_err(werr)?;
            }
            std::fs::rename(&f, &dest).map_err(werr)?;
        }
        self.committed = true;
        let _ = std::fs::remove_dir_all(&self.tmp);
        Ok(())
    }
}

impl Drop for Staging {
    fn drop(&mut self) {
        if !self.committed {
            let _ = std::fs::remove_dir_all(&self.tmp);
        }
    }
}

fn collect_files(dir: &Path, out: &mut Vec<PathBuf>) -> std::io::Result<()> {
    let mut entries: Vec<_> = std::fs::read_dir(dir)?
        .collect::<Result<Vec<_>, _>>()?
        .into_iter()
        .map(|e| e.path())
        .collect();
    entries.sort();
    for p in entries {
        if p.is_dir() {
            collect_files(&p, out)?;
        } else {
            out.push(p);
        }
    }
    Ok(())
}

/// The same file for comparisons: canonical when it exists, else the
/// canonical parent joined with the name, else the path as given.
fn identity(p: &Path) -> PathBuf {
    if let Ok(c) = p.canonicalize() {
        return c;
    }
    match (p.parent(), p.file_name()) {
        (Some(parent), Some(name)) => {
            let parent = if parent.as_os_str().is_empty() {
                Path::new(".")
            } else {
                parent
            };
            parent
                .canonicalize()
                .map(|c| c.join(name))
                .unwrap_or_else(|_| p.to_path_buf())
        }
        _ => p.to_path_buf(),
    }
}

/// Refuse, before anything runs, an output folder `out` (from `origin`)
/// that exists as a file, or whose outputs `names` would replace one of
/// `inputs`, or that is itself an input.
pub fn check_out_dir(
    out: &Path,
    origin: &str,
    names: &[&str],
    inputs: &[PathBuf],
) -> Result<(), FileError> {
    let conflict = |why: String| FileError::Conflict {
        origin: origin.to_string(),
        path: out.to_path_buf(),
        why,
    };
    if out.exists() && !out.is_dir() {
        return Err(conflict(
            "exists as a file; the output is a folder (give a folder path)".into(),
        ));
    }
    let ins: Vec<PathBuf> = inputs.iter().map(|p| identity(p)).collect();
    let out_id = identity(out);
    if let Some(i) = ins.iter().position(|i| *i == out_id) {
        return Err(conflict(format!(
            "names the input file {}",
            inputs[i].display()
        )));
    }
    for n in names {
        let o = identity(&out.join(n));
        if let Some(i) = ins.iter().position(|i| *i == o) {
            return Err(conflict(format!(
                "would replace the input file {} with its {n}",
                inputs[i].display()
            )));
        }
    }
    Ok(())
}

/// Refuse, before anything runs, an output file `out` (from `origin`)
/// that is one of `inputs` or exists as a folder.
pub fn check_out_file(out: &Path, origin: &str, inputs: &[PathBuf]) -> Result<(), FileError> {
    let conflict = |why: String| FileError::Conflict {
        origin: origin.to_string(),
        path: out.to_path_buf(),
        why,
    };
    if out.is_dir() {
        return Err(conflict("exists as a folder; the output is a file".into()));
    }
    let o = identity(out);
    if let Some(i) = inputs.iter().position(|i| identity(i) == o) {
        return Err(conflict(format!(
            "names the input file {}",
            inputs[i].display()
        )));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn scratch(tag: &str) -> PathBuf {
        let d = std::env::temp_dir().join(format!("diodestat-files-{tag}-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&d);
        std::fs::create_dir_all(&d).unwrap();
        d
    }

    #[test]
    fn endless_file_is_refused_at_the_cap() {
        let e = read_text_capped(Path::new("/dev/zero"), "board", 1000).unwrap_err();
        assert!(matches!(e, FileError::TooLarge { cap: 1000, .. }), "{e}");
        let s = e.to_string();
        assert!(s.starts_with("board: /dev/zero"), "{s}");
        assert!(s.contains("1000 bytes"), "{s}");
        assert!(
            e.detail().starts_with("/dev/zero: larger"),
            "{}",
            e.detail()
        );
    }

    #[test]
    fn file_at_the_cap_is_read_and_one_byte_more_is_not() {
        let d = scratch("cap");
        std::fs::write(d.join("a"), "x".repeat(10)).unwrap();
        assert_eq!(read_text_capped(&d.join("a"), "k", 10).unwrap().len(), 10);
        assert!(read_text_capped(&d.join("a"), "k", 9).is_err());
        let e = read_text(&d, "SCENARIO").unwrap_err().to_string();
        assert!(e.contains("folder"), "{e}");
        std::fs::write(d.join("b"), [0xff, 0xfe]).unwrap();
        let e = read_text(&d.join("b"), "k").unwrap_err();
        assert!(matches!(e, FileError::NotText { .. }));
        let _ = std::fs::remove_dir_all(&d);
    }

    #[test]
    fn staged_outputs_replace_the_old_ones_only_on_commit() {
        let d = scratch("stage");
        let out = d.join("out");
        std::fs::create_dir_all(&out).unwrap();
        std::fs::write(out.join("a.csv"), "old a").unwrap();
        std::fs::write(out.join("b.svg"), "old b").unwrap();
        {
            let s = Staging::new(&out).unwrap();
            std::fs::write(s.path("a.csv"), "new a").unwrap();
            // Dropped before b is written: the run failed.
        }
        assert_eq!(std::fs::read_to_string(out.join("a.csv")).unwrap(), "old a");
        assert_eq!(std::fs::read_dir(&out).unwrap().count(), 2);
        let s = Staging::new(&out).unwrap();
        std::fs::write(s.path("a.csv"), "new a").unwrap();
        std::fs::create_dir_all(s.path("sub")).unwrap();
        std::fs::write(s.path("sub/c.svg"), "new c").unwrap();
        s.commit().unwrap();
        assert_eq!(std::fs::read_to_string(out.join("a.csv")).unwrap(), "new a");
        assert_eq!(std::fs::read_to_string(out.join("b.svg")).unwrap(), "old b");
        assert_eq!(
            std::fs::read_to_string(out.join("sub/c.svg")).unwrap(),
            "new c"
        );
        assert_eq!(std::fs::read_dir(&out).unwrap().count(), 3);
        let _ = std::fs::remove_dir_all(&d);
    }

    #[test]
    fn atomic_write_leaves_no_temporary() {
        let d = scratch("atomic");
        write_atomic(&d.join("x.rs"), b"one").unwrap();
        write_atomic(&d.join("x.rs"), b"two").unwrap();
        assert_eq!(std::fs::read_to_string(d.join("x.rs")).unwrap(), "two");
        assert_eq!(std::fs::read_dir(&d).unwrap().count(), 1);
        assert!(write_atomic(&d.join("no/such/x.rs"), b"x").is_err());
        let _ = std::fs::remove_dir_all(&d);
    }

    #[test]
    fn conflicts_are_named() {
        let d = scratch("conflict");
        let input = d.join("board.toml");
        std::fs::write(&input, "x").unwrap();
        let e = check_out_file(&input, "--out", std::slice::from_ref(&input))
            .unwrap_err()
            .to_string();
        assert!(e.starts_with("--out") && e.contains("input file"), "{e}");
        let e = check_out_dir(&input, "--out", &[], &[])
            .unwrap_err()
            .to_string();
        assert!(e.contains("exists as a file"), "{e}");
        let trace = d.join("trace.csv");
        std::fs::write(&trace, "x").unwrap();
        let e = check_out_dir(&d, "--out", &["trace.csv"], std::slice::from_ref(&trace))
            .unwrap_err()
            .to_string();
        assert!(e.contains("would replace the input file"), "{e}");
        assert!(check_out_dir(&d.join("new"), "--out", &["trace.csv"], &[input]).is_ok());
        let _ = std::fs::remove_dir_all(&d);
    }
}
