//! The scan commands: `cavern scan`, `cavern status`, `cavern merge`, and the scan part of
//! `cavern check`.

use super::exec::{self, duration_label, in_shard, journal_path, Options};
use super::journal;
use super::spec::Scan;
use crate::run::bytes_label;
use crate::AppError;
use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};

/// Exit code of a scan (or merge) that finished and wrote its output, but with failed points:
/// the runtime-failure code 1 (the failed points are runtime failures; the message and
/// `/scan/status` say which, and the file is complete for the others).
pub const EXIT_POINTS_FAILED: i32 = 1;

/// Arguments of `cavern scan`.
#[derive(clap::Args, Debug)]
pub struct ScanArgs {
    /// The TOML config file with a [scan] table.
    file: PathBuf,
    /// Output file (default: the config's file name with extension .h5). The journal is written
    /// next to it (OUT.journal, or OUT.shard-K-of-N.journal).
    #[arg(short = 'o', long = "output")]
    output: Option<PathBuf>,
    /// Run only the K-th of N disjoint parts (1 ≤ K ≤ N), e.g. 2/8. Inside a SLURM job array the
    /// shard is taken from SLURM_ARRAY_TASK_ID, _MIN, _MAX, _STEP and _COUNT.
    #[arg(long, value_name = "K/N")]
    shard: Option<String>,
    /// Points to run at the same time (default: chosen from cores and memory).
    #[arg(long)]
    parallel: Option<usize>,
    /// Worker threads per point (default: the cores left over by --parallel).
    #[arg(long)]
    threads: Option<usize>,
    /// Recompute points the journal records as failed.
    #[arg(long)]
    retry_failed: bool,
    /// No progress output.
    #[arg(short, long)]
    quiet: bool,
}

/// Arguments of `cavern status`.
#[derive(clap::Args, Debug)]
pub struct StatusArgs {
    /// The scan's output file (its journals OUT.journal / OUT.shard-K-of-N.journal are read), or
    /// a journal.
    output: PathBuf,
}

/// Arguments of `cavern merge`.
#[derive(clap::Args, Debug)]
pub struct MergeArgs {
    /// The merged HDF5 file to write.
    #[arg(short = 'o', long = "output", required = true)]
    output: PathBuf,
    /// The shard journals (OUT.shard-K-of-N.journal files).
    #[arg(required = true)]
    journals: Vec<PathBuf>,
}

fn load(file: &Path) -> Result<Scan, AppError> {
    Scan::load(file)
        .map_err(|e| AppError::Input(e.to_string()))?
        .ok_or_else(|| {
            AppError::Input(format!(
                "{}: no [scan] table; a scan needs [scan] with [[scan.axis]] entries (README, \"Parameter scans\"); \
                 for a single run use `cavern run`",
                file.display()
            ))
        })
}

fn parse_shard(s: &str) -> Option<(usize, usize)> {
    let (k, n) = s.split_once('/')?;
    let (k, n): (usize, usize) = (k.trim().parse().ok()?, n.trim().parse().ok()?);
    (k >= 1 && k <= n).then_some((k, n))
}

/// The shard from `--shard` or, inside a SLURM array task, from its environment; with where it
/// came from.
fn shard(arg: Option<&str>) -> Result<((usize, usize), Option<String>), AppError> {
    if let Some(s) = arg {
        return parse_shard(s).map(|k| (k, None)).ok_or_else(|| {
            AppError::Input(format!(
                "--shard {s}: expected K/N with 1 ≤ K ≤ N, e.g. --shard 2/8"
            ))
        });
    }
    let var = |n: &str| {
        std::env::var(n)
            .ok()
            .and_then(|v| v.trim().parse::<i64>().ok())
    };
    let Some(id) = var("SLURM_ARRAY_TASK_ID") else {
        return Ok(((1, 1), None));
    };
    let min = var("SLURM_ARRAY_TASK_MIN").unwrap_or(0);
    let step = var("SLURM_ARRAY_TASK_STEP").unwrap_or(1).max(1);
    let count = var("SLURM_ARRAY_TASK_COUNT")
        .or_else(|| var("SLURM_ARRAY_TASK_MAX").map(|max| (max - min) / step + 1));
    let k = (id - min) / step + 1;
    match count {
        Some(n) if k >= 1 && k <= n && (id - min) % step == 0 => Ok((
            (k as usize, n as usize),
            Some(format!(
                "SLURM_ARRAY_TASK_ID={id} of an array of {n} task(s) starting at {min}"
            )),
        )),
        _ => Err(AppError::Input(format!(
            "SLURM_ARRAY_TASK_ID={id} does not fit the array (min {min}, step {step}, count {count:?}); give --shard K/N explicitly"
        ))),
    }
}

/// `cavern scan`: returns the number of failed points.
///
/// # Errors
/// As [`exec::run_scan`].
pub fn scan(a: ScanArgs) -> Result<usize, AppError> {
    let sc = load(&a.file)?;
    let (shard, from_env) = shard(a.shard.as_deref())?;
    let output = crate::cli::output_path(&a.file, a.output)?;
    if let (Some(why), false) = (&from_env, a.quiet) {
        eprintln!("scan: shard {}/{} from {why}", shard.0, shard.1);
    }
    let opts = Options {
        output,
        shard,
        parallel: a.parallel.filter(|&p| p > 0),
        threads: a.threads.filter(|&t| t > 0),
        quiet: a.quiet,
        retry_failed: a.retry_failed,
    };
    let out = exec::run_scan(&sc, &opts)?;
    if !a.quiet {
        let failed = if out.failed > 0 {
            format!(
                "; {} point(s) FAILED (reasons in /scan/error; exit code {EXIT_POINTS_FAILED})",
                out.failed
            )
        } else {
            String::new()
        };
        match &out.wrote {
            Some(p) => println!("wrote {} ({} points{failed})", p.display(), out.total),
            None => println!(
                "shard {}/{} finished: {} points in {}{failed}; combine the shards with `cavern merge -o OUT {}`",
                shard.0,
                shard.1,
                out.total,
                out.journal.display(),
                journal_path(&opts.output, (1, 1))
                    .display()
                    .to_string()
                    .replace(".journal", ".shard-*-of-*.journal")
            ),
        }
    }
    Ok(out.failed)
}

/// The scan part of `cavern check` for a config with `[scan]` (`None` without one).
///
/// # Errors
/// Bad scan tables and points ([`AppError::Input`]); a failing calibration point.
pub fn check_text(file: &Path) -> Result<Option<String>, AppError> {
    let Some(sc) = Scan::load(file).map_err(|e| AppError::Input(e.to_string()))? else {
        return Ok(None);
    };
    let sv = exec::survey(&sc, true)?;
    let n = sc.n_points();
    let sp = exec::split(&sv, n, None, None);
    let mut s = String::from("\n");
    let axes: Vec<String> = sc
        .axes
        .iter()
        .map(|a| {
            let paths: Vec<String> = a
                .settings
                .iter()
                .map(|s| format!("{} [{}]", s.path, s.units))
                .collect();
            format!(
                "{} ({} values: {})",
                a.name,
                a.len(),
                paths.join(" zipped with ")
            )
        })
        .collect();
    let dims: Vec<String> = sc.shape().iter().map(|k| k.to_string()).collect();
    let _ = writeln!(
        s,
        "scan        {n} points = {} over {} axis/axes:",
        dims.join(" × "),
        sc.axes.len()
    );
    for a in axes {
        let _ = writeln!(s, "              {a}");
    }
    if sc.per_point_seed {
        let _ = writeln!(
            s,
            "seeds       per point: SplitMix64 of (scan seed {}, point index); independent of threads, order and shards",
            sc.seed
        );
    }
    let _ = writeln!(
        s,
        "memory      up to {} per point ({} solver, largest d = {}); allowed {} in total → at most {} point(s) at a time",
        bytes_label(sv.max_memory),
        sv.layout.method.name(),
        sv.max_dim,
        sv.allowed.map_or("unknown".into(), bytes_label),
        if sp.memory_cap == usize::MAX { "unlimited".into() } else { sp.memory_cap.to_string() }
    );
    let _ = writeln!(
        s,
        "split       {} point(s) at a time × {} thread(s) each on {} core(s) (override with --parallel, --threads)",
        sp.parallel, sp.threads, sp.cores
    );
    match exec::estimate(&sc, &sp) {
        Ok(e) => {
            let _ = writeln!(
                s,
                "time        ≈ {} in total on this machine (≈ {} per point); {}",
                duration_label(e.total),
                duration_label(e.per_point),
                e.how
            );
        }
        Err(e) => {
            let _ = writeln!(s, "time        unknown: a calibration point failed: {e}");
        }
    }
    Ok(Some(s))
}

/// Refuse `cavern run` on a scan config.
///
/// # Errors
/// [`AppError::Input`] when the config has `[scan]`.
pub fn refuse_run(file: &Path, source: &str) -> Result<(), AppError> {
    if super::spec::has_scan(source) {
        return Err(AppError::Input(format!(
            "{}: this config has a [scan] table, so it describes many runs; run it with `cavern scan {}` \
             (or remove [scan] for a single run)",
            file.display(),
            file.display()
        )));
    }
    Ok(())
}

fn journals_of(out: &Path) -> Vec<PathBuf> {
    if out.extension().is_some_and(|e| e == "journal") && out.is_file() {
        return vec![out.to_path_buf()];
    }
    let mut v = Vec::new();
    let whole = journal_path(out, (1, 1));
    if whole.is_file() {
        v.push(whole);
    }
    let dir = match out.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    let name = out
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    let prefix = format!("{name}.shard-");
    if let Ok(rd) = std::fs::read_dir(&dir) {
        let mut shards: Vec<PathBuf> = rd
            .flatten()
            .map(|e| e.path())
            .filter(|p| {
                p.file_name()
                    .map(|f| f.to_string_lossy().into_owned())
                    .is_some_and(|f| f.starts_with(&prefix) && f.ends_with(".journal"))
            })
            .collect();
        shards.sort();
        v.extend(shards);
    }
    v
}

fn read_journal(p: &Path) -> Result<journal::Contents, AppError> {
    journal::read(p)
        .map_err(|e| AppError::Runtime(format!("{}: {e}", p.display())))?
        .ok_or_else(|| AppError::Runtime(format!("{}: not a scan journal, or empty", p.display())))
}

/// `cavern status OUT`: done, failed, remaining and ETA per journal and in total.
///
/// # Errors
/// [`AppError::Input`] when no journal is found.
pub fn status(a: StatusArgs) -> Result<String, AppError> {
    let js = journals_of(&a.output);
    if js.is_empty() {
        return Err(AppError::Input(format!(
            "no scan journal for {}: looked for {} and {}.shard-K-of-N.journal",
            a.output.display(),
            journal_path(&a.output, (1, 1)).display(),
            a.output.display()
        )));
    }
    let now = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map_or(0.0, |d| d.as_secs_f64());
    let mut s = String::new();
    let mut all: BTreeMap<u64, bool> = BTreeMap::new();
    let mut total = 0u64;
    let mut rate_sum = 0.0;
    for p in &js {
        let c = read_journal(p)?;
        let h = &c.header;
        total = total.max(h.n_points);
        let shard = (h.shard.0 as usize, h.shard.1 as usize);
        let mine = (0..h.n_points as usize)
            .filter(|&i| in_shard(i, shard))
            .count();
        let latest = c.latest();
        let done = latest.len();
        let failed = latest.values().filter(|r| !r.ok).count();
        for (i, r) in &latest {
            all.insert(*i, r.ok);
        }
        let mut times: Vec<f64> = c.points.iter().map(|r| r.finished_at).collect();
        times.sort_by(f64::total_cmp);
        let recent = &times[times.len().saturating_sub(50)..];
        let rate = match recent {
            [a, .., b] if b > a => (recent.len() - 1) as f64 / (b - a),
            _ => f64::NAN,
        };
        let remaining = mine - done.min(mine);
        if remaining > 0 && rate.is_finite() {
            rate_sum += rate;
        }
        let _ = write!(
            s,
            "{}: shard {}/{}: {done}/{mine} done, {failed} failed, {remaining} remaining",
            p.display(),
            shard.0,
            shard.1
        );
        if remaining > 0 {
            let _ = write!(
                s,
                "; {} points/min recently, eta {}",
                if rate.is_finite() {
                    format!("{:.2}", rate * 60.0)
                } else {
                    "?".into()
                },
                duration_label(remaining as f64 / rate)
            );
        }
        if let Some(&last) = times.last() {
            let _ = write!(
                s,
                "; last point finished {} ago",
                duration_label(now - last)
            );
        }
        if c.torn_bytes > 0 {
            let _ = write!(
                s,
                "; {} byte(s) of a torn last record will be discarded",
                c.torn_bytes
            );
        }
        s.push('\n');
    }
    let done = all.len() as u64;
    let failed = all.values().filter(|ok| !**ok).count();
    let remaining = total - done.min(total);
    let _ = writeln!(
        s,
        "total: {done}/{total} points done, {failed} failed, {remaining} remaining{}",
        if remaining > 0 {
            format!(
                ", eta {} (if the unfinished journals keep their recent rate)",
                duration_label(remaining as f64 / rate_sum)
            )
        } else {
            String::new()
        }
    );
    let _ = writeln!(
        s,
        "result file {}: {}",
        a.output.display(),
        if a.output.is_file() {
            "written"
        } else {
            "not written yet"
        }
    );
    Ok(s)
}

/// `cavern merge`: combine shard journals into one result file; returns the failed points.
///
/// # Errors
/// Journals of different configs, conflicting duplicates, missing points.
pub fn merge(a: MergeArgs) -> Result<usize, AppError> {
    let contents: Vec<(PathBuf, journal::Contents)> = a
        .journals
        .iter()
        .map(|p| read_journal(p).map(|c| (p.clone(), c)))
        .collect::<Result<_, _>>()?;
    let h0 = contents[0].1.header.clone();
    for (p, c) in &contents[1..] {
        if c.header.config_hash != h0.config_hash {
            return Err(AppError::Input(format!(
                "{} and {} were written by different configs (SHA-256 {}… and {}…); merge only the shards of one scan",
                a.journals[0].display(),
                p.display(),
                &h0.config_hash[..12.min(h0.config_hash.len())],
                &c.header.config_hash[..12.min(c.header.config_hash.len())]
            )));
        }
    }
    let mut sc = Scan::parse(Path::new(&h0.config_abs), &h0.config_text)
        .map_err(|e| AppError::Input(format!("the config stored in the journals: {e}")))?
        .ok_or_else(|| AppError::Input("the config stored in the journals has no [scan]".into()))?;
    let sv = exec::survey(&sc, false)?;
    // the result file names the config as the shards were given it, like a single-machine run
    sc.path = PathBuf::from(&h0.config_path);
    sc.base.path = sc.path.clone();
    let mut records: BTreeMap<u64, &journal::PointRecord> = BTreeMap::new();
    let mut from: BTreeMap<u64, &Path> = BTreeMap::new();
    let mut duplicates = Vec::new();
    for (p, c) in &contents {
        for (i, r) in c.latest() {
            match records.get(&i) {
                None => {
                    records.insert(i, r);
                    from.insert(i, p);
                }
                Some(prev) if prev.same_result(r) => duplicates.push(i),
                Some(_) => {
                    return Err(AppError::Runtime(format!(
                        "point {i} is in both {} and {} with different results; the shards overlap and disagree \
                         (different machines or cavern versions?); remove one of them",
                        from[&i].display(),
                        p.display()
                    )))
                }
            }
        }
        if c.torn_bytes > 0 {
            eprintln!(
                "note: {}: discarded a torn last record ({} bytes)",
                p.display(),
                c.torn_bytes
            );
        }
    }
    if !duplicates.is_empty() {
        eprintln!(
            "note: {} point(s) appear in more than one journal with identical results (kept once): {}",
            duplicates.len(),
            index_list(&duplicates)
        );
    }
    let n = sc.n_points() as u64;
    let missing: Vec<u64> = (0..n).filter(|i| !records.contains_key(i)).collect();
    if !missing.is_empty() {
        let mut shards: Vec<String> = contents
            .iter()
            .map(|(_, c)| c.header.shard.1)
            .collect::<std::collections::BTreeSet<_>>()
            .into_iter()
            .flat_map(|nsh| {
                let missing = &missing;
                (1..=nsh)
                    .filter(move |k| {
                        missing
                            .iter()
                            .any(|&i| in_shard(i as usize, (*k as usize, nsh as usize)))
                    })
                    .map(move |k| format!("{k}/{nsh}"))
            })
            .collect();
        shards.dedup();
        return Err(AppError::Runtime(format!(
            "{} of {n} points are missing: {}; they belong to shard(s) {} — rerun those (the same command resumes) \
             and merge again; no file was written",
            missing.len(),
            index_list(&missing),
            shards.join(", ")
        )));
    }
    super::file::write(&sc, &sv.layout, &records, &a.output)?;
    let failed = records.values().filter(|r| !r.ok).count();
    println!(
        "merged {} journal(s) into {}: {n} points{}",
        contents.len(),
        a.output.display(),
        if failed > 0 {
            format!(", {failed} FAILED (exit code {EXIT_POINTS_FAILED})")
        } else {
            String::new()
        }
    );
    Ok(failed)
}

/// `3, 7, 11, …` (at most 20 entries).
fn index_list(v: &[u64]) -> String {
    let mut s: Vec<String> = v.iter().take(20).map(|i| i.to_string()).collect();
    if v.len() > 20 {
        s.push(format!("… ({} more)", v.len() - 20));
    }
    s.join(", ")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shard_syntax() {
        assert_eq!(parse_shard("2/8"), Some((2, 8)));
        assert_eq!(parse_shard("0/8"), None);
        assert_eq!(parse_shard("9/8"), None);
        assert_eq!(parse_shard("x"), None);
    }
}
