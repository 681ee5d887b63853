//! The scan journal: an append-only file next to the output holding one record per finished
//! point, the source of truth for resuming, `cavern status` and `cavern merge`.
//!
//! Format (all integers little-endian): a sequence of frames
//! `"CVSJ" | u32 payload length | payload | first 8 bytes of SHA-256(length ‖ payload)`.
//! The first frame is the header (payload kind byte `H`), every further frame one point (`P`).
//! Each point is appended and `fsync`ed before it counts as done. A frame that is incomplete or
//! fails its checksum (a write torn by a crash) ends the valid part: it and anything after it are
//! discarded, and the file is truncated to the valid part before new frames are appended.

use sha2::{Digest, Sha256};
use std::fs::{File, OpenOptions};
use std::io::{self, Write};
use std::path::{Path, PathBuf};

const MAGIC: &[u8; 4] = b"CVSJ";
/// Format version written into the header.
pub const VERSION: u32 = 1;

/// What a journal is about.
#[derive(Clone, Debug, PartialEq)]
pub struct Header {
    /// Hex SHA-256 of the config text.
    pub config_hash: String,
    /// The config file as given on the command line (written into the result file).
    pub config_path: String,
    /// The config file's absolute path (to read files it refers to when merging elsewhere).
    pub config_abs: String,
    /// The config text.
    pub config_text: String,
    /// Points of the whole scan.
    pub n_points: u64,
    /// Shard k (1-based) of n; (1, 1) for a whole scan.
    pub shard: (u64, u64),
}

/// One finished point.
#[derive(Clone, Debug, PartialEq)]
pub struct PointRecord {
    /// Flat point index (row-major over the axes).
    pub index: u64,
    /// Whether the point succeeded.
    pub ok: bool,
    /// Why it failed (empty if ok).
    pub error: String,
    /// Warnings of the run.
    pub warnings: Vec<String>,
    /// Integrator steps (accepted), rejected steps, right-hand-side evaluations.
    pub steps: u64,
    /// Rejected steps.
    pub rejected: u64,
    /// Right-hand-side evaluations.
    pub rhs_evals: u64,
    /// Hilbert-space dimension.
    pub dim: u64,
    /// The point's seed (trajectories), if it got one.
    pub seed: Option<u64>,
    /// Wall-clock seconds of the point (for estimates only; not in the result file).
    pub wall_seconds: f64,
    /// Unix time when it finished (for rates; not in the result file).
    pub finished_at: f64,
    /// Sample times.
    pub times: Vec<f64>,
    /// Observable values in the scan's layout order (empty if failed).
    pub values: Vec<f64>,
}

/// Byte encoder.
#[derive(Default)]
struct Enc(Vec<u8>);

impl Enc {
    fn u64(&mut self, v: u64) {
        self.0.extend_from_slice(&v.to_le_bytes());
    }
    fn f64(&mut self, v: f64) {
        self.0.extend_from_slice(&v.to_le_bytes());
    }
    fn str(&mut self, s: &str) {
        self.u64(s.len() as u64);
        self.0.extend_from_slice(s.as_bytes());
    }
    fn f64s(&mut self, v: &[f64]) {
        self.u64(v.len() as u64);
        for &x in v {
            self.f64(x);
        }
    }
}

/// Byte decoder; `None` on running out of bytes or bad UTF-8.
struct Dec<'a>(&'a [u8]);

impl Dec<'_> {
    fn take(&mut self, n: usize) -> Option<&[u8]> {
        if self.0.len() < n {
            return None;
        }
        let (a, b) = self.0.split_at(n);
        self.0 = b;
        Some(a)
    }
    fn u64(&mut self) -> Option<u64> {
        Some(u64::from_le_bytes(self.take(8)?.try_into().ok()?))
    }
    fn f64(&mut self) -> Option<f64> {
        Some(f64::from_bits(self.u64()?))
    }
    fn len(&mut self) -> Option<usize> {
        let n = usize::try_from(self.u64()?).ok()?;
        (n <= self.0.len()).then_some(n)
    }
    fn str(&mut self) -> Option<String> {
        let n = self.len()?;
        String::from_utf8(self.take(n)?.to_vec()).ok()
    }
    fn f64s(&mut self) -> Option<Vec<f64>> {
        let n = self.u64()? as usize;
        if n > self.0.len() / 8 {
            return None;
        }
        (0..n).map(|_| self.f64()).collect()
    }
}

impl Header {
    fn encode(&self) -> Vec<u8> {
        let mut e = Enc::default();
        e.0.push(b'H');
        e.u64(u64::from(VERSION));
        e.str(&self.config_hash);
        e.str(&self.config_path);
        e.str(&self.config_abs);
        e.str(&self.config_text);
        e.u64(self.n_points);
        e.u64(self.shard.0);
        e.u64(self.shard.1);
        e.0
    }

    fn decode(b: &[u8]) -> Option<Self> {
        let mut d = Dec(b);
        if d.take(1)? != b"H" || d.u64()? != u64::from(VERSION) {
            return None;
        }
        Some(Header {
            config_hash: d.str()?,
            config_path: d.str()?,
            config_abs: d.str()?,
            config_text: d.str()?,
            n_points: d.u64()?,
            shard: (d.u64()?, d.u64()?),
        })
    }
}

impl PointRecord {
    /// The payload bytes.
    pub fn encode(&self) -> Vec<u8> {
        let mut e = Enc::default();
        e.0.push(b'P');
        e.u64(self.index);
        e.u64(u64::from(self.ok));
        e.str(&self.error);
        e.u64(self.warnings.len() as u64);
        for w in &self.warnings {
            e.str(w);
        }
        e.u64(self.steps);
        e.u64(self.rejected);
        e.u64(self.rhs_evals);
        e.u64(self.dim);
        e.u64(self.seed.map_or(0, |s| s + 1));
        e.f64(self.wall_seconds);
        e.f64(self.finished_at);
        e.f64s(&self.times);
        e.f64s(&self.values);
        e.0
    }

    fn decode(b: &[u8]) -> Option<Self> {
        let mut d = Dec(b);
        if d.take(1)? != b"P" {
            return None;
        }
        let index = d.u64()?;
        let ok = d.u64()? == 1;
        let error = d.str()?;
        let nw = d.u64()? as usize;
        let warnings = (0..nw.min(b.len()))
            .map(|_| d.str())
            .collect::<Option<_>>()?;
        Some(PointRecord {
            index,
            ok,
            error,
            warnings,
            steps: d.u64()?,
            rejected: d.u64()?,
            rhs_evals: d.u64()?,
            dim: d.u64()?,
            seed: d.u64()?.checked_sub(1),
            wall_seconds: d.f64()?,
            finished_at: d.f64()?,
            times: d.f64s()?,
            values: d.f64s()?,
        })
    }

    /// The same result (everything but the timing fields).
    pub fn same_result(&self, other: &PointRecord) -> bool {
        let strip = |r: &PointRecord| PointRecord {
            wall_seconds: 0.0,
            finished_at: 0.0,
            ..r.clone()
        };
        strip(self).encode() == strip(other).encode()
    }
}

fn checksum(len: &[u8], payload: &[u8]) -> [u8; 8] {
    let mut h = Sha256::new();
    h.update(len);
    h.update(payload);
    let d = h.finalize();
    let mut out = [0u8; 8];
    out.copy_from_slice(&d[..8]);
    out
}

fn frame(payload: &[u8]) -> Vec<u8> {
    let len = (payload.len() as u32).to_le_bytes();
    let mut f = Vec::with_capacity(payload.len() + 16);
    f.extend_from_slice(MAGIC);
    f.extend_from_slice(&len);
    f.extend_from_slice(payload);
    f.extend_from_slice(&checksum(&len, payload));
    f
}

/// What a journal file holds.
#[derive(Clone, Debug)]
pub struct Contents {
    /// The header.
    pub header: Header,
    /// Point records in file order (a later record of the same index supersedes an earlier one).
    pub points: Vec<PointRecord>,
    /// Length of the valid part of the file.
    pub valid_len: u64,
    /// Bytes after the valid part (a torn or corrupt tail), discarded.
    pub torn_bytes: u64,
}

impl Contents {
    /// The last record of every point index, by index.
    pub fn latest(&self) -> std::collections::BTreeMap<u64, &PointRecord> {
        let mut m = std::collections::BTreeMap::new();
        for p in &self.points {
            m.insert(p.index, p);
        }
        m
    }
}

/// Read a journal. `Ok(None)` when the file does not exist or holds no complete header (a crash
/// while it was being created).
///
/// # Errors
/// I/O errors, and a file that is not a cavern journal.
pub fn read(path: &Path) -> io::Result<Option<Contents>> {
    let bytes = match std::fs::read(path) {
        Ok(b) => b,
        Err(e) if e.kind() == io::ErrorKind::NotFound => return Ok(None),
        Err(e) => return Err(e),
    };
    if !bytes.is_empty() && !bytes.starts_with(&MAGIC[..bytes.len().min(4)]) {
        return Err(io::Error::new(
            io::ErrorKind::InvalidData,
            "not a cavern scan journal",
        ));
    }
    let mut at = 0usize;
    let mut payloads = Vec::new();
    while bytes.len() - at >= 8 {
        if &bytes[at..at + 4] != MAGIC {
            break;
        }
        let len_bytes = &bytes[at + 4..at + 8];
        let len = u32::from_le_bytes(len_bytes.try_into().expect("4 bytes")) as usize;
        let end = at + 8 + len + 8;
        if end > bytes.len() {
            break;
        }
        let payload = &bytes[at + 8..at + 8 + len];
        if checksum(len_bytes, payload) != bytes[at + 8 + len..end] {
            break;
        }
        payloads.push((payload, end));
        at = end;
    }
    let mut it = payloads.into_iter();
    let Some((first, mut valid)) = it.next() else {
        return Ok(None);
    };
    let header = Header::decode(first).ok_or_else(|| {
        io::Error::new(
            io::ErrorKind::InvalidData,
            "the journal header is not understood (written by another cavern version?)",
        )
    })?;
    let mut points = Vec::new();
    for (p, end) in it {
        match PointRecord::decode(p) {
            Some(r) => {
                points.push(r);
                valid = end;
            }
            None => break,
        }
    }
    Ok(Some(Contents {
        header,
        points,
        valid_len: valid as u64,
        torn_bytes: (bytes.len() - valid) as u64,
    }))
}

/// An open journal, appending with fsync.
pub struct Journal {
    file: File,
    /// Its path.
    pub path: PathBuf,
}

fn sync_dir(path: &Path) {
    let dir = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p,
        _ => Path::new("."),
    };
    if let Ok(d) = File::open(dir) {
        let _ = d.sync_all();
    }
}

impl Journal {
    /// Create a journal holding only `header` (written to a temporary file, synced, renamed).
    ///
    /// # Errors
    /// I/O errors.
    pub fn create(path: &Path, header: &Header) -> io::Result<Journal> {
        let mut tmp = path.as_os_str().to_owned();
        tmp.push(format!(".tmp-{}", std::process::id()));
        let tmp = PathBuf::from(tmp);
        {
            let mut f = File::create(&tmp)?;
            f.write_all(&frame(&header.encode()))?;
            f.sync_all()?;
        }
        std::fs::rename(&tmp, path)?;
        sync_dir(path);
        Self::open(path, None)
    }

    /// Open an existing journal for appending (locked against a second writer), first cutting it
    /// to `valid_len` (discarding a torn tail).
    ///
    /// # Errors
    /// I/O errors.
    pub fn open(path: &Path, valid_len: Option<u64>) -> io::Result<Journal> {
        let file = OpenOptions::new().read(true).write(true).open(path)?;
        // one writer per journal; the lock goes away with the process, even after kill -9
        if let Err(e) = file.try_lock() {
            return Err(match e {
                std::fs::TryLockError::WouldBlock => io::Error::new(
                    io::ErrorKind::WouldBlock,
                    "another cavern process is running this scan (the journal is locked); \
                     wait for it, or stop it first",
                ),
                std::fs::TryLockError::Error(e) => e,
            });
        }
        if let Some(n) = valid_len {
            if file.metadata()?.len() != n {
                file.set_len(n)?;
                file.sync_all()?;
            }
        }
        let mut j = Journal {
            file,
            path: path.to_path_buf(),
        };
        use std::io::Seek;
        j.file.seek(io::SeekFrom::End(0))?;
        Ok(j)
    }

    /// Append one point and fsync: when this returns `Ok`, the point survives a crash.
    ///
    /// # Errors
    /// I/O errors.
    pub fn append(&mut self, rec: &PointRecord) -> io::Result<()> {
        self.file.write_all(&frame(&rec.encode()))?;
        self.file.sync_data()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn rec(i: u64) -> PointRecord {
        PointRecord {
            index: i,
            ok: i.is_multiple_of(2),
            error: if i.is_multiple_of(2) {
                String::new()
            } else {
                "NaN at t = 1".into()
            },
            warnings: vec!["w".into()],
            steps: 10 + i,
            rejected: 1,
            rhs_evals: 70,
            dim: 8,
            seed: (i == 2).then_some(0),
            wall_seconds: 0.5,
            finished_at: 1.0e9,
            times: vec![0.0, 0.5, 1.0],
            values: vec![f64::NAN, -0.0, 1.0 / 3.0, f64::MIN_POSITIVE / 4.0],
        }
    }

    #[test]
    fn round_trip_and_torn_tail_at_every_cut() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("j");
        let header = Header {
            config_hash: "ab".into(),
            config_path: "x.toml".into(),
            config_abs: "/x.toml".into(),
            config_text: "[scan]".into(),
            n_points: 3,
            shard: (1, 1),
        };
        let mut j = Journal::create(&path, &header).unwrap();
        for i in 0..3 {
            j.append(&rec(i)).unwrap();
        }
        drop(j);
        let full = std::fs::read(&path).unwrap();
        let c = read(&path).unwrap().unwrap();
        assert_eq!(c.header, header);
        assert_eq!(c.points.len(), 3);
        for (a, b) in c.points.iter().zip((0..3).map(rec)) {
            assert!(a.same_result(&b));
            assert_eq!(a.values[2].to_bits(), (1.0f64 / 3.0).to_bits());
        }
        // every truncation keeps exactly the complete records before the cut
        let header_len = frame(&header.encode()).len();
        // end offsets of the header and of each record
        let mut ends = vec![header_len];
        for i in 0..3 {
            ends.push(ends[ends.len() - 1] + frame(&rec(i).encode()).len());
        }
        assert_eq!(ends[3], full.len());
        for cut in 0..full.len() {
            std::fs::write(&path, &full[..cut]).unwrap();
            match read(&path).unwrap() {
                None => assert!(cut < header_len),
                Some(c) => {
                    let whole = ends.iter().filter(|&&e| e <= cut).count() - 1;
                    assert_eq!(c.points.len(), whole, "cut at {cut}");
                    assert_eq!(c.valid_len as usize, ends[whole]);
                }
            }
        }
        let rec_len = ends[3] - ends[2];
        // a flipped byte in the last record is detected by the checksum
        let mut bad = full.clone();
        let n = bad.len();
        bad[n - 12] ^= 1;
        std::fs::write(&path, &bad).unwrap();
        let c = read(&path).unwrap().unwrap();
        assert_eq!(c.points.len(), 2);
        assert_eq!(c.torn_bytes as usize, rec_len);
        // resuming cuts the tail before appending
        let mut j = Journal::open(&path, Some(c.valid_len)).unwrap();
        j.append(&rec(2)).unwrap();
        assert_eq!(std::fs::read(&path).unwrap(), full);
        // a second writer is refused while the first holds the journal
        let e = Journal::open(&path, None).err().expect("locked");
        assert_eq!(e.kind(), io::ErrorKind::WouldBlock);
        drop(j);
        assert!(Journal::open(&path, None).is_ok());
    }
}
