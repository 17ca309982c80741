//! Benchmark of `septum analyze` on simulated runs of several sizes.
//!
//! ```sh
//! cargo run --release --example bench                       # small, medium, large + growth grid
//! cargo run --release --example bench -- --quick            # the smallest size only
//! cargo run --release --example bench -- --sizes small,medium,large,huge --keep /tmp/septum-bench
//! ```
//!
//! For each size it writes a run with `septum simulate` (a model derived from
//! the built-in one: float32 WAVs, one test frequency, no idle capture, no
//! common-drive step), runs `septum analyze` once to warm the page cache and
//! then `--repeats` times, measuring the wall time and the child's peak
//! resident memory (wait4). It measures the machine's memory read bandwidth
//! and relates each time to the time one read pass over the WAV data would
//! take. When numpy is importable it runs `benches/reference.py` on the same
//! run after each timed septum run (the two alternate, so that a machine
//! slowing down for a while slows both) and compares its median time (as it
//! reports it, reading included, interpreter start excluded) and the worst
//! separation. Every figure printed is measured here; nothing is a
//! pass/fail test.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::Instant;

/// One benchmark size.
#[derive(Clone)]
struct Size {
    name: String,
    channels: u32,
    sample_rate_hz: u32,
    /// Length of each capture, seconds (steady record plus latency, ramps, tail).
    seconds: f64,
    /// Short latency, ramps and tail (for the 256-channel run).
    short_edges: bool,
}

impl Size {
    fn new(name: &str, channels: u32, sample_rate_hz: u32, seconds: f64) -> Self {
        Self {
            name: name.to_string(),
            channels,
            sample_rate_hz,
            seconds,
            short_edges: false,
        }
    }

    fn label(&self) -> String {
        format!(
            "{} ch x {} x {} s @ {} kHz",
            self.channels,
            self.channels,
            self.seconds,
            self.sample_rate_hz / 1000
        )
    }
}

fn named_size(name: &str) -> Option<Size> {
    Some(match name {
        "small" => Size::new("small", 8, 48_000, 2.0),
        "medium" => Size::new("medium", 32, 48_000, 2.0),
        "large" => Size::new("large", 64, 96_000, 1.0),
        "huge" => Size {
            short_edges: true,
            ..Size::new("huge", 256, 48_000, 0.125)
        },
        _ => return None,
    })
}

struct Options {
    sizes: Vec<Size>,
    keep: Option<PathBuf>,
    repeats: usize,
    grid: bool,
    reference: bool,
    python: Option<String>,
}

const USAGE: &str = "usage: bench [--quick] [--sizes small,medium,large,huge] [--keep DIR] \
[--repeats N] [--no-grid] [--no-reference] [--python PATH]";

fn parse_args() -> Result<Options, String> {
    let mut o = Options {
        sizes: ["small", "medium", "large"]
            .iter()
            .map(|s| named_size(s).unwrap())
            .collect(),
        keep: None,
        repeats: 3,
        grid: true,
        reference: true,
        python: None,
    };
    let mut args = std::env::args().skip(1);
    let mut quick = false;
    while let Some(a) = args.next() {
        let mut value = |what: &str| args.next().ok_or(format!("{a} needs {what}\n{USAGE}"));
        match a.as_str() {
            "--quick" => quick = true,
            "--sizes" => {
                o.sizes = value("a list")?
                    .split(',')
                    .map(|s| named_size(s.trim()).ok_or(format!("unknown size {s}")))
                    .collect::<Result<_, _>>()?
            }
            "--keep" => o.keep = Some(PathBuf::from(value("a folder")?)),
            "--repeats" => {
                o.repeats = value("a count")?
                    .parse::<usize>()
                    .map_err(|e| e.to_string())?
                    .max(1)
            }
            "--no-grid" => o.grid = false,
            "--no-reference" => o.reference = false,
            "--python" => o.python = Some(value("a path")?),
            "-h" | "--help" => {
                println!("{USAGE}");
                std::process::exit(0);
            }
            _ => return Err(format!("unknown argument {a}\n{USAGE}")),
        }
    }
    if quick {
        o.sizes.truncate(1);
        o.sizes = vec![named_size("small").unwrap()];
        o.grid = false;
        o.repeats = o.repeats.min(3);
    }
    Ok(o)
}

fn septum_binary() -> Result<PathBuf, String> {
    // target/release/examples/bench -> target/release/septum
    let exe = std::env::current_exe().map_err(|e| e.to_string())?;
    let dir = exe
        .parent()
        .and_then(Path::parent)
        .ok_or("cannot locate the target folder")?;
    let cargo = std::env::var("CARGO").unwrap_or_else(|_| "cargo".into());
    let release = dir.file_name().is_some_and(|n| n == "release");
    let mut cmd = Command::new(cargo);
    cmd.args(["build", "--quiet", "--bin", "septum"]);
    if release {
        cmd.arg("--release");
    } else {
        eprintln!(
            "bench: warning: not a release build; run with `cargo run --release --example bench`"
        );
    }
    let status = cmd.status().map_err(|e| format!("cargo build: {e}"))?;
    if !status.success() {
        return Err("cargo build --bin septum failed".into());
    }
    Ok(dir.join("septum"))
}

fn run_ok(cmd: &mut Command, what: &str) -> Result<String, String> {
    let out = cmd
        .stderr(Stdio::inherit())
        .output()
        .map_err(|e| format!("{what}: {e}"))?;
    if !out.status.success() {
        return Err(format!("{what} failed ({})", out.status));
    }
    Ok(String::from_utf8_lossy(&out.stdout).into_owned())
}

/// Replace the value of the first `key = …` line (inside any table).
fn set_key(text: &str, key: &str, value: &str) -> Result<String, String> {
    let mut done = false;
    let lines: Vec<String> = text
        .lines()
        .map(|l| {
            let t = l.trim_start();
            let is_key = t
                .strip_prefix(key)
                .is_some_and(|rest| rest.trim_start().starts_with('='));
            if !done && is_key {
                done = true;
                format!("{key} = {value}")
            } else {
                l.to_string()
            }
        })
        .collect();
    if !done {
        return Err(format!("the default model has no key {key}"));
    }
    Ok(lines.join("\n") + "\n")
}

/// Drop a `[table]` and its keys, up to the next table header.
fn drop_table(text: &str, table: &str) -> String {
    let mut out = String::new();
    let mut skipping = false;
    for l in text.lines() {
        let t = l.trim_start();
        if t.starts_with('[') {
            skipping = t.starts_with(&format!("[{table}]"));
        }
        if !skipping {
            out.push_str(l);
            out.push('\n');
        }
    }
    out
}

/// The model text of one size, derived from the built-in model.
fn model_for(base: &str, s: &Size) -> Result<String, String> {
    let fs = f64::from(s.sample_rate_hz);
    let (latency, ramp, tail) = if s.short_edges {
        (0.010, 0.005, 0.005)
    } else {
        (0.040, 0.020, 0.020)
    };
    let edges = ((latency + 2.0 * ramp + tail) * fs).round();
    let record = (s.seconds * fs - edges).round().max(1024.0);
    let mut m = drop_table(base, "common_drive");
    for (k, v) in [
        ("channels", s.channels.to_string()),
        ("sample_rate_hz", s.sample_rate_hz.to_string()),
        ("wav", "\"float32\"".to_string()),
        ("preferred_hz", "[1000.0]".to_string()),
        ("record_samples", format!("{record}")),
        ("idle_samples", "0".to_string()),
        ("latency_s", format!("{latency}")),
        ("ramp_s", format!("{ramp}")),
        ("tail_s", format!("{tail}")),
    ] {
        m = set_key(&m, k, &v)?;
    }
    Ok(m)
}

/// Bytes of the WAVs under `dir/captures`.
fn wav_bytes(run: &Path) -> u64 {
    std::fs::read_dir(run.join("captures"))
        .map(|d| {
            d.flatten()
                .filter_map(|e| e.metadata().ok())
                .map(|m| m.len())
                .sum()
        })
        .unwrap_or(0)
}

/// Write the run of size `s` under `root`, unless the same model is there already.
fn prepare(septum: &Path, base: &str, s: &Size, root: &Path) -> Result<PathBuf, String> {
    let model = model_for(base, s)?;
    let model_path = root.join(format!("model-{}.toml", s.name));
    let run = root.join(format!("run-{}", s.name));
    let same = std::fs::read_to_string(&model_path).is_ok_and(|m| m == model)
        && run.join("run.json").exists();
    if !same {
        std::fs::write(&model_path, &model).map_err(|e| e.to_string())?;
        let t = Instant::now();
        run_ok(
            Command::new(septum)
                .args(["simulate", "--quiet", "--force", "--model"])
                .arg(&model_path)
                .arg("--out")
                .arg(&run),
            "septum simulate",
        )?;
        eprintln!(
            "bench: simulated {} ({}) in {:.1} s",
            s.name,
            s.label(),
            t.elapsed().as_secs_f64()
        );
    }
    Ok(run)
}

/// Wall time (s), CPU time (user + system, s) and peak RSS (bytes) of one child process.
fn timed_child(cmd: &mut Command) -> Result<(f64, f64, u64), String> {
    let t = Instant::now();
    let child = cmd
        .stdout(Stdio::null())
        .stderr(Stdio::inherit())
        .spawn()
        .map_err(|e| e.to_string())?;
    let pid = child.id() as libc::pid_t;
    let mut status = 0;
    // SAFETY: rusage is plain data, zero is a valid value; wait4 fills it.
    let mut usage: libc::rusage = unsafe { std::mem::zeroed() };
    let r = unsafe { libc::wait4(pid, &mut status, 0, &mut usage) };
    let wall = t.elapsed().as_secs_f64();
    if r != pid {
        return Err(format!("wait4: {}", std::io::Error::last_os_error()));
    }
    if !(libc::WIFEXITED(status) && libc::WEXITSTATUS(status) == 0) {
        return Err(format!("child failed, wait status {status}"));
    }
    let secs = |t: libc::timeval| t.tv_sec as f64 + t.tv_usec as f64 * 1e-6;
    let cpu = secs(usage.ru_utime) + secs(usage.ru_stime);
    // ru_maxrss is in KiB on Linux.
    Ok((wall, cpu, usage.ru_maxrss as u64 * 1024))
}

struct Measured {
    median_s: f64,
    best_s: f64,
    cpu_s: f64,
    peak_rss: u64,
}

/// Time `septum analyze` `repeats` times after a warm-up run; `between`
/// runs after each timed run (the reference, so that the two alternate and
/// a machine slowing down for a while affects both alike).
fn measure_analyze(
    septum: &Path,
    run: &Path,
    res: &Path,
    repeats: usize,
    between: &mut dyn FnMut() -> Result<(), String>,
) -> Result<Measured, String> {
    let cmd = || {
        let mut c = Command::new(septum);
        c.arg("analyze")
            .arg(run)
            .arg("--out")
            .arg(res)
            .args(["--force", "-q"]);
        c
    };
    timed_child(&mut cmd())?; // warm the page cache
    let mut times = Vec::new();
    let mut cpus = Vec::new();
    let mut peak = 0;
    for _ in 0..repeats {
        let (t, cpu, rss) = timed_child(&mut cmd())?;
        times.push(t);
        cpus.push(cpu);
        peak = peak.max(rss);
        between()?;
    }
    times.sort_by(f64::total_cmp);
    cpus.sort_by(f64::total_cmp);
    Ok(Measured {
        median_s: times[times.len() / 2],
        best_s: times[0],
        cpu_s: cpus[cpus.len() / 2],
        peak_rss: peak,
    })
}

/// Memory read bandwidth in bytes/s over a 1 GiB buffer, best of five, on
/// `threads` threads.
fn read_bandwidth(buf: &[u64], threads: usize) -> f64 {
    let mut best = f64::INFINITY;
    for _ in 0..5 {
        let t = Instant::now();
        let chunk = buf.len().div_ceil(threads);
        let total: u64 = std::thread::scope(|sc| {
            let hs: Vec<_> = buf
                .chunks(chunk)
                .map(|c| {
                    sc.spawn(move || {
                        let mut acc = [0u64; 8];
                        for b in c.chunks_exact(8) {
                            for i in 0..8 {
                                acc[i] = acc[i].wrapping_add(b[i]);
                            }
                        }
                        acc.iter().fold(0u64, |a, b| a.wrapping_add(*b))
                    })
                })
                .collect();
            hs.into_iter()
                .map(|h| h.join().unwrap())
                .fold(0, u64::wrapping_add)
        });
        std::hint::black_box(total);
        best = best.min(t.elapsed().as_secs_f64());
    }
    std::mem::size_of_val(buf) as f64 / best
}

/// A Python interpreter that imports numpy, if any.
fn find_python(explicit: Option<&str>, target: &Path) -> Option<String> {
    let venv = target.join("bench-venv/bin/python3");
    let candidates: Vec<String> = match explicit {
        Some(p) => vec![p.to_string()],
        None => vec![venv.to_string_lossy().into_owned(), "python3".into()],
    };
    candidates.into_iter().find(|p| {
        Command::new(p)
            .args(["-c", "import numpy"])
            .stderr(Stdio::null())
            .status()
            .is_ok_and(|s| s.success())
    })
}

/// One run of reference.py: time (s), worst-separation difference (dB), its line.
fn run_reference_once(
    python: &str,
    script: &Path,
    run: &Path,
    pairs: &Path,
) -> Result<(f64, f64, String), String> {
    let out = run_ok(
        Command::new(python)
            .arg(script)
            .arg(run)
            .arg("--pairs")
            .arg(pairs),
        "benches/reference.py",
    )?;
    let line = out.lines().last().unwrap_or("").to_string();
    let num_after = |tag: &str| -> Option<f64> {
        let rest = &line[line.find(tag)? + tag.len()..];
        rest.split_whitespace().next()?.parse().ok()
    };
    let t = num_after("MB in ").ok_or(format!("cannot read the time in: {line}"))?;
    let d = num_after("difference ").ok_or(format!("cannot read the difference in: {line}"))?;
    Ok((t, d, line))
}

/// The 1, 5 and 15 minute load averages (other work on a shared machine slows every figure).
fn load_average() -> String {
    std::fs::read_to_string("/proc/loadavg")
        .map(|l| l.split_whitespace().take(3).collect::<Vec<_>>().join(" "))
        .unwrap_or_else(|_| "unknown".into())
}

fn mb(bytes: u64) -> f64 {
    bytes as f64 / 1e6
}

fn main() {
    if let Err(e) = real_main() {
        eprintln!("bench: error: {e}");
        std::process::exit(1);
    }
}

/// Hidden mode: measure the bandwidth in a process of its own, so that the
/// 1 GiB buffer does not count in the peak RSS of the children spawned later
/// (Linux carries the parent's high-water mark into a vfork'ed child).
const BANDWIDTH_CHILD: &str = "--bandwidth-child";

fn measure_bandwidth() -> Result<(f64, f64, usize), String> {
    let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
    let exe = std::env::current_exe().map_err(|e| e.to_string())?;
    let out = run_ok(Command::new(exe).arg(BANDWIDTH_CHILD), "bandwidth")?;
    let v: Vec<f64> = out
        .split_whitespace()
        .filter_map(|w| w.parse().ok())
        .collect();
    match v[..] {
        [one, all] => Ok((one, all, cores)),
        _ => Err(format!("bandwidth child printed {out}")),
    }
}

fn real_main() -> Result<(), String> {
    if std::env::args().nth(1).as_deref() == Some(BANDWIDTH_CHILD) {
        let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
        let buf = vec![1u64; (1usize << 30) / 8];
        println!(
            "{} {}",
            read_bandwidth(&buf, 1),
            read_bandwidth(&buf, cores)
        );
        return Ok(());
    }
    let o = parse_args()?;
    let septum = septum_binary()?;
    let target = septum
        .parent()
        .and_then(Path::parent)
        .ok_or("no target folder")?
        .to_path_buf();
    let root = o.keep.clone().unwrap_or_else(|| target.join("bench-runs"));
    std::fs::create_dir_all(&root).map_err(|e| format!("{}: {e}", root.display()))?;
    let base = run_ok(
        Command::new(&septum).args(["simulate", "--print-model"]),
        "septum simulate --print-model",
    )?;

    // Machine figures.
    let (bw1, bw, cores) = measure_bandwidth()?;
    let date = run_ok(
        Command::new("date").args(["-u", "+%Y-%m-%d %H:%M UTC"]),
        "date",
    )
    .unwrap_or_default();
    println!("septum bench, {}", date.trim());
    println!(
        "machine: {cores} cores; memory read bandwidth {:.1} GB/s on 1 thread, {:.1} GB/s on {cores} (1 GiB sum, best of 5)",
        bw1 / 1e9,
        bw / 1e9
    );

    let script = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("benches/reference.py");
    let python = if o.reference {
        let p = find_python(o.python.as_deref(), &target);
        if p.is_none() {
            println!(
                "numpy reference skipped: numpy is not importable. Install it with\n  \
                 python3 -m venv target/bench-venv && target/bench-venv/bin/pip install numpy"
            );
        }
        p
    } else {
        None
    };
    println!("load average at start: {}", load_average());
    println!(
        "septum analyze: {} timed runs after one warm-up, median wall time; peak RSS is the largest of them",
        o.repeats
    );
    println!();

    let mut table = String::new();
    writeln!(
        table,
        "{:<7} {:<33} {:>8} {:>9} {:>8} {:>8} {:>9} {:>10} {:>9} {:>10} {:>9} {:>8} {:>9}",
        "size",
        "run",
        "WAV MB",
        "time s",
        "best s",
        "CPU s",
        "MB/s",
        "capt/s",
        "RSS MB",
        "x bw bound",
        "numpy s",
        "speed-up",
        "worst dB"
    )
    .unwrap();
    let mut notes = Vec::new();
    for s in &o.sizes {
        let run = prepare(&septum, &base, s, &root)?;
        let res = root.join(format!("results-{}", s.name));
        let bytes = wav_bytes(&run);
        // The reference runs after each timed septum run, on the results
        // septum just wrote (its worst pair is compared with theirs).
        let mut reference: Vec<(f64, f64, String)> = Vec::new();
        let mut failure = None;
        let pairs = res.join("pairs.csv");
        let mut between = || {
            if let (Some(p), None) = (&python, &failure) {
                match run_reference_once(p, &script, &run, &pairs) {
                    Ok(r) => reference.push(r),
                    Err(e) => failure = Some(e),
                }
            }
            Ok(())
        };
        let m = measure_analyze(&septum, &run, &res, o.repeats, &mut between)?;
        let captures = s.channels as f64;
        let bound = bytes as f64 / bw;
        let (np_s, speedup, diff) = match (&python, failure) {
            (Some(_), None) if !reference.is_empty() => {
                reference.sort_by(|a, b| a.0.total_cmp(&b.0));
                let (t, d, line) = reference.swap_remove(reference.len() / 2);
                notes.push(format!("{}: {line}", s.name));
                (
                    format!("{t:.2}"),
                    format!("{:.1}x", t / m.median_s),
                    format!("{d:+.3}"),
                )
            }
            (Some(_), Some(e)) => {
                notes.push(format!("{}: reference failed: {e}", s.name));
                ("-".into(), "-".into(), "-".into())
            }
            _ => ("-".into(), "-".into(), "-".into()),
        };
        writeln!(
            table,
            "{:<7} {:<33} {:>8.1} {:>9.3} {:>8.3} {:>8.2} {:>9.0} {:>10.1} {:>9.0} {:>10.1} {:>9} {:>8} {:>9}",
            s.name,
            s.label(),
            mb(bytes),
            m.median_s,
            m.best_s,
            m.cpu_s,
            mb(bytes) / m.median_s,
            captures / m.median_s,
            mb(m.peak_rss),
            m.median_s / bound,
            np_s,
            speedup,
            diff
        )
        .unwrap();
        // Print as we go: the large sizes take a while.
        print!("{table}");
        table.clear();
        if o.keep.is_none() {
            let _ = std::fs::remove_dir_all(&run);
            let _ = std::fs::remove_dir_all(&res);
        }
    }
    println!("(CPU s: user + system time of the child, median; x bw bound: wall time over the time one read pass of the WAV bytes takes at {:.1} GB/s; numpy s: median of the reference's own timings; worst dB: numpy's worst separation minus septum's)", bw / 1e9);
    for n in notes {
        println!("  {n}");
    }

    if o.grid {
        println!();
        println!("Growth with channels and record length (48 kHz, one capture per channel, median of {}):", o.repeats);
        println!(
            "{:>8} {:>9} {:>8} {:>9} {:>8} {:>9} {:>12} {:>14}",
            "channels",
            "capture s",
            "WAV MB",
            "time s",
            "CPU s",
            "RSS MB",
            "ms per MB",
            "RSS / capture"
        );
        for ch in [8u32, 16, 32] {
            for secs in [1.0, 2.0] {
                let s = Size::new(&format!("grid-{ch}x{secs}"), ch, 48_000, secs);
                let run = prepare(&septum, &base, &s, &root)?;
                let res = root.join(format!("results-{}", s.name));
                let bytes = wav_bytes(&run);
                let m = measure_analyze(&septum, &run, &res, o.repeats, &mut || Ok(()))?;
                println!(
                    "{:>8} {:>9} {:>8.1} {:>9.3} {:>8.2} {:>9.0} {:>12.2} {:>13.2}x",
                    ch,
                    secs,
                    mb(bytes),
                    m.median_s,
                    m.cpu_s,
                    mb(m.peak_rss),
                    1e3 * m.median_s / mb(bytes),
                    m.peak_rss as f64 / (bytes as f64 / f64::from(ch))
                );
                if o.keep.is_none() {
                    let _ = std::fs::remove_dir_all(&run);
                    let _ = std::fs::remove_dir_all(&res);
                }
            }
        }
        println!("(RSS / capture: peak RSS over the size of one capture's WAV)");
    }
    println!();
    println!("load average at end: {}", load_average());
    Ok(())
}
