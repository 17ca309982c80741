//! The demo report in a real browser: Debian's chromium, headless, opens the
//! file offline, renders a non-blank page with the heat maps and the verdict,
//! and logs no console errors. Skips with a message when chromium is not
//! installed, unless SEPTUM_REQUIRE_BROWSER=1 (as CI sets it).

mod common;
use common::*;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

fn find_browser() -> Option<PathBuf> {
    let path = std::env::var_os("PATH")?;
    std::env::split_paths(&path)
        .flat_map(|d| ["chromium", "chromium-browser"].map(|n| d.join(n)))
        .find(|p| p.is_file())
}

/// Run the browser with `extra` flags on `url`; (stdout, stderr). Killed
/// after two minutes.
fn browse(browser: &Path, extra: &[String], url: &str) -> (String, String) {
    let profile = tempfile::tempdir().unwrap();
    let mut child = Command::new(browser)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-quic",
            "--no-first-run",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            "--enable-logging=stderr",
            "--v=0",
        ])
        .arg(format!("--user-data-dir={}", profile.path().display()))
        .args(extra)
        .arg(url)
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("the browser starts");
    let (mut out, mut err) = (child.stdout.take().unwrap(), child.stderr.take().unwrap());
    let t_out = std::thread::spawn(move || {
        let mut s = String::new();
        std::io::Read::read_to_string(&mut out, &mut s).ok();
        s
    });
    let t_err = std::thread::spawn(move || {
        let mut s = String::new();
        std::io::Read::read_to_string(&mut err, &mut s).ok();
        s
    });
    let start = Instant::now();
    loop {
        if child.try_wait().unwrap().is_some() {
            break;
        }
        if start.elapsed() > Duration::from_secs(120) {
            child.kill().ok();
            child.wait().ok();
            panic!("{} did not finish within two minutes", browser.display());
        }
        std::thread::sleep(Duration::from_millis(100));
    }
    (t_out.join().unwrap(), t_err.join().unwrap())
}

/// Lines of the browser's log that tell of a page problem: console output
/// (the report has no script, so any is unexpected), uncaught errors, and
/// resources that failed to load.
fn page_problems(stderr: &str) -> Vec<&str> {
    stderr
        .lines()
        .filter(|l| {
            l.contains("CONSOLE")
                || l.contains("Uncaught")
                || l.contains("net::ERR_")
                || l.contains("Failed to load resource")
        })
        .collect()
}

/// Mean and variance of the luma of an 8-bit RGB(A) PNG, and its size.
fn luma_stats(path: &Path) -> (u32, u32, f64, f64) {
    let file = std::io::BufReader::new(std::fs::File::open(path).unwrap());
    let mut reader = png::Decoder::new(file).read_info().unwrap();
    let mut buf = vec![0; reader.output_buffer_size().unwrap()];
    let info = reader.next_frame(&mut buf).unwrap();
    assert_eq!(info.bit_depth, png::BitDepth::Eight);
    let step = match info.color_type {
        png::ColorType::Rgba => 4,
        png::ColorType::Rgb => 3,
        other => panic!("unexpected PNG colour type {other:?}"),
    };
    let px = &buf[..info.buffer_size()];
    let lum: Vec<f64> = px
        .chunks_exact(step)
        .map(|c| 0.2126 * f64::from(c[0]) + 0.7152 * f64::from(c[1]) + 0.0722 * f64::from(c[2]))
        .collect();
    let n = lum.len() as f64;
    let mean = lum.iter().sum::<f64>() / n;
    let var = lum.iter().map(|l| (l - mean).powi(2)).sum::<f64>() / n;
    (info.width, info.height, mean, var)
}

#[test]
fn demo_report_renders_in_a_real_browser() {
    let Some(browser) = find_browser() else {
        if std::env::var("SEPTUM_REQUIRE_BROWSER").as_deref() == Ok("1") {
            panic!(
                "SEPTUM_REQUIRE_BROWSER=1 but no chromium on PATH (apt-get install -y chromium)"
            );
        }
        // Written past the test harness's capture so that the skip shows.
        let _ = writeln!(
            std::io::stderr(),
            "SKIPPED demo_report_renders_in_a_real_browser: chromium is not installed \
             (apt-get install -y chromium; SEPTUM_REQUIRE_BROWSER=1 turns this skip into a failure)"
        );
        return;
    };
    let w = Workdir::new();
    w.ok(&["demo", "--out", "demo"]);
    let limits = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/procedures/limits-commissioning.toml"
    );
    let claims = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/procedures/claims-example.toml"
    );
    let out = w.septum(&[
        "report",
        "demo/results",
        "--out",
        "report.html",
        "--limits",
        limits,
        "--claims",
        claims,
    ]);
    // The example claims include a noise maximum that input 7 misses.
    assert_eq!(
        out.status.code(),
        Some(3),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let page = w.path("report.html").canonicalize().unwrap();
    let url = format!("file://{}", page.display());

    let shot = w.path("report.png");
    let (_, log) = browse(
        &browser,
        &[
            format!("--screenshot={}", shot.display()),
            "--window-size=1280,4000".into(),
        ],
        &url,
    );
    assert!(
        page_problems(&log).is_empty(),
        "page problems: {:?}",
        page_problems(&log)
    );
    let (width, height, mean, var) = luma_stats(&shot);
    assert_eq!((width, height), (1280, 4000));
    // A blank page has a variance near 0; text, tables and heat maps give
    // thousands (luma 0–255).
    assert!(
        var > 500.0,
        "the screenshot looks blank: mean {mean:.1}, variance {var:.1}"
    );
    let keep = std::env::var_os("SEPTUM_KEEP_SCREENSHOT");
    if let Some(dest) = keep {
        std::fs::copy(&shot, dest).unwrap();
    }

    let (dom, log) = browse(&browser, &["--dump-dom".to_string()], &url);
    assert!(
        page_problems(&log).is_empty(),
        "page problems: {:?}",
        page_problems(&log)
    );
    assert!(
        dom.contains("Channel isolation report"),
        "the DOM: {}",
        &dom[..dom.len().min(500)]
    );
    let heatmaps = dom.matches(r#"<svg class="heatmap""#).count();
    assert_eq!(heatmaps, 4, "one heat map per test frequency of the demo");
    assert!(dom.contains(r#"id="verdict-badge""#) && dom.contains(r#"data-outcome="fail""#));
    assert!(dom.contains("Mossgate Vibration Lab"));
}
