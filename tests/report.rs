//! The HTML report without a browser: one self-contained file, every pair
//! in its heat map, lower bounds marked, the verdict and its exit code,
//! refusals that lose nothing.

mod common;
use common::*;
use std::fs;

fn three_channels(w: &Workdir, name: &str) {
    let mut pairs = Vec::new();
    for (f, base) in [(1000.0, 100.0), (10000.0, 80.0)] {
        for a in 1..=3u32 {
            for v in (1..=3u32).filter(|&v| v != a) {
                let adjacent = a.abs_diff(v) == 1;
                let s = if adjacent { base } else { base + 25.0 } + f64::from(a);
                // The far pair 3 → 1 at 1 kHz sits at the noise floor.
                let bound = f == 1000.0 && a == 3 && v == 1;
                pairs.push((f, a, v, s, bound, (!bound).then_some(0.1)));
            }
        }
    }
    results_folder(&w.path(name), &pairs, &[-115.0, -116.5, -112.25], "short");
}

fn count(hay: &str, needle: &str) -> usize {
    hay.matches(needle).count()
}

#[test]
fn a_self_contained_page_with_every_pair() {
    let w = Workdir::new();
    three_channels(&w, "res");
    let out = w.septum(&["report", "res", "--out", "r.html"]);
    assert_eq!(out.status.code(), Some(0));
    let html = fs::read_to_string(w.path("r.html")).unwrap();
    assert!(html.starts_with("<!DOCTYPE html>"));
    // Nothing to fetch and nothing to run: no scripts, no external links or
    // sources (the SVG namespace URI is a name, never loaded).
    assert_eq!(count(&html, "<script"), 0);
    assert_eq!(count(&html, " src="), 0);
    assert_eq!(count(&html, "<link"), 0);
    assert_eq!(
        count(&html, "http"),
        count(&html, "http://www.w3.org/2000/svg")
    );
    // One heat map per test frequency; 6 pairs each, one a lower bound.
    assert_eq!(count(&html, r#"<svg class="heatmap""#), 2);
    assert_eq!(
        count(&html, r#"class="cell""#) + count(&html, r#"class="cell bound""#),
        12
    );
    assert_eq!(count(&html, r#"class="cell bound""#), 1);
    assert!(
        html.contains(">≥128.0</text>"),
        "the bound 3 → 1 shows as ≥"
    );
    // Each figure the report prints is computed from the folder: the channel
    // 3 floor −112.25 dBFS is a 112.25 dB dynamic range (rounded to 0.1).
    assert!(html.contains(">-112.2<") || html.contains(">-112.3<"));
    assert!(html.contains(">112.2<") || html.contains(">112.3<"));
    assert!(
        html.contains(r#"data-outcome="none""#),
        "no verdict was asked"
    );
    for section in [
        "job",
        "identity",
        "channels",
        "cautions",
        "verdict",
        "leakage",
        "separation",
        "floors",
        "spectra",
        "warnings",
    ] {
        assert!(
            html.contains(&format!(r#"id="{section}""#)),
            "section {section}"
        );
    }
    assert!(
        html.contains("IEPE") && html.contains("accredited"),
        "the cautions"
    );
    assert!(html.contains("@media print") && html.contains("size: A4"));
}

#[test]
fn text_from_files_is_escaped() {
    let w = Workdir::new();
    three_channels(&w, "res");
    let p = w.path("res/summary.json");
    let mut v: serde_json::Value = serde_json::from_str(&fs::read_to_string(&p).unwrap()).unwrap();
    v["run"]["front_end"]["label"] = "rack <b>C</b> & \"D\"".into();
    fs::write(&p, v.to_string()).unwrap();
    w.ok(&["report", "res", "--out", "r.html"]);
    let html = fs::read_to_string(w.path("r.html")).unwrap();
    assert!(html.contains("rack &lt;b&gt;C&lt;/b&gt; &amp; &quot;D&quot;"));
    assert!(!html.contains("<b>C</b>"));
}

#[test]
fn the_verdict_sets_the_exit_code_and_shows_in_the_page() {
    let w = Workdir::new();
    three_channels(&w, "res");
    fs::write(
        w.path("pass.toml"),
        "[[separation]]\nfrom_hz = 20\nto_hz = 20000\nmin_db = 70\n",
    )
    .unwrap();
    fs::write(
        w.path("fail.toml"),
        "[[separation]]\nat_hz = 10000\npairs = \"adjacent\"\nmin_db = 82.5\n",
    )
    .unwrap();
    let out = w.septum(&["report", "res", "--out", "ok.html", "--limits", "pass.toml"]);
    assert_eq!(out.status.code(), Some(0));
    let html = fs::read_to_string(w.path("ok.html")).unwrap();
    assert!(html.contains(r#"data-outcome="pass""#));
    assert!(html.contains(r#"class="limit-line""#), "the limit is drawn");
    let out = w.septum(&[
        "report",
        "res",
        "--out",
        "bad.html",
        "--limits",
        "fail.toml",
    ]);
    assert_eq!(out.status.code(), Some(3));
    let html = fs::read_to_string(w.path("bad.html")).unwrap();
    assert!(html.contains(r#"data-outcome="fail""#));
    // Adjacent pairs at 10 kHz are 81, 82, 82 and 83 dB (± 0.1): three miss 82.5.
    assert!(html.contains("3 of 4 pairs judged do not pass"));
    // Against itself as a baseline: nothing drifts.
    let out = w.septum(&["report", "res", "--out", "base.html", "--baseline", "res"]);
    assert_eq!(out.status.code(), Some(0));
    assert!(fs::read_to_string(w.path("base.html"))
        .unwrap()
        .contains("Against the baseline"));
}

#[test]
fn refusals_keep_the_earlier_report() {
    let w = Workdir::new();
    three_channels(&w, "res");
    w.ok(&["report", "res", "--out", "r.html"]);
    let before = fs::read_to_string(w.path("r.html")).unwrap();
    let e = w.fails(&["report", "res", "--out", "r.html"]);
    assert!(e.contains("r.html: exists") && e.contains("--force"), "{e}");
    // A spectrum listed in summary.json but missing: one line naming it.
    let p = w.path("res/summary.json");
    let mut v: serde_json::Value = serde_json::from_str(&fs::read_to_string(&p).unwrap()).unwrap();
    v["spectra"] = serde_json::json!([{"frequency_hz": 1000.0, "file": "spectrum-1000Hz.csv", "aggressor": 1, "victim": 2}]);
    fs::write(&p, v.to_string()).unwrap();
    let e = w.fails(&["report", "res", "--out", "r.html", "--force"]);
    assert!(
        e.contains("spectrum-1000Hz.csv") && e.contains("No such file"),
        "{e}"
    );
    fs::write(
        w.path("res/spectrum-1000Hz.csv"),
        "frequency_hz,aggressor_peak_dbfs,victim_peak_dbfs\n10,-1,oops\n",
    )
    .unwrap();
    let e = w.fails(&["report", "res", "--out", "r.html", "--force"]);
    assert!(
        e.contains("spectrum-1000Hz.csv: line 2: victim_peak_dbfs \"oops\""),
        "{e}"
    );
    assert_eq!(fs::read_to_string(w.path("r.html")).unwrap(), before);
    let e = w.fails(&["report", "missing", "--out", "x.html"]);
    assert!(e.contains("missing"), "{e}");
    assert!(!w.path("x.html").exists());
}

/// The other figures of the same captures reach the report when the results
/// folder holds them: band and A-weighted floors, the driven channel, the
/// coupling mechanism, the common-drive step.
#[test]
fn report_shows_the_other_figures() {
    let w = Workdir::new();
    let m = w.model(
        "m.toml",
        &[
            (
                "preferred_hz = [125.0, 1000.0, 4000.0, 16000.0]",
                "preferred_hz = [125.0, 1000.0, 8000.0]",
            ),
            ("record_samples = 65536", "record_samples = 16384"),
            ("idle_samples = 65536", "idle_samples = 16384"),
        ],
    );
    w.ok(&[
        "simulate",
        "-q",
        "--out",
        "run",
        "--model",
        m.to_str().unwrap(),
    ]);
    w.ok(&["analyze", "-q", "run", "--out", "res"]);
    w.ok(&["report", "res", "--out", "r.html"]);
    let html = std::fs::read_to_string(w.path("r.html")).unwrap();
    for needle in [
        "More figures from the same captures",
        "drive.csv",
        "sinad db",
        "coupling-matrix.csv",
        "capacitive-or-inductive",
        "common-drive.csv",
        "skew us",
        "noise a weighted 20Hz 20kHz dbfs",
    ] {
        assert!(html.contains(needle), "report lacks {needle:?}");
    }
}
