//! `survey`, `trend` and `report`, through the real binary.
//!
//! - survey: the noise floor against the standard deviation the test's own Gaussian
//!   generator was given (the definition of the noise), and the predicted ratio against what
//!   `encode` then writes (another run of the binary);
//! - trend: a linearly growing 5th harmonic against the slope the test put in, and THD
//!   against IEEE 519's definition (RMS of harmonics 2 … 50 over the fundamental) computed
//!   here from the source with rustfft;
//! - report: rendered by Chromium (a real browser, installed by `.ci/run`) to a PNG that must
//!   have the window's size and not be blank, and its DOM text must hold each channel's name
//!   and figures from `inspect --json`.
use std::path::Path;
use std::process::Command;

use crate::support::parquet_io::read_table;
use crate::support::signals::{grid, rng};
use crate::support::source::*;
use crate::support::*;
use arrow::datatypes::TimeUnit;
use rand::Rng;
use rand_distr::{Distribution, Normal};

/// A 50 Hz wave with harmonics 3 and 5 plus white Gaussian noise of standard deviation σ.
fn noisy(n: usize, fs: f64, sigma: f64, seed: u64) -> Vec<f64> {
    let mut r = rng(seed);
    let nd = Normal::new(0.0, sigma).expect("valid normal");
    (0..n)
        .map(|m| {
            let w = std::f64::consts::TAU * 50.0 * m as f64 / fs;
            10.0 * w.cos()
                + 0.8 * (3.0 * w + 0.3).cos()
                + 0.4 * (5.0 * w + 1.0).cos()
                + nd.sample(&mut r)
        })
        .collect()
}

/// A pump's bearing housing: a 25 Hz shaft line; once per turn an impact ringing a 400 Hz
/// resonance (5 ms decay); 40 steady tones of 0.5 at random frequencies from 60 to 900 Hz,
/// not harmonics of the shaft (the structure's and the neighbouring machines' lines); and
/// white Gaussian noise of standard deviation σ, the
/// noise floor the survey must find. Lines leave the periodogram's median at the noise (a
/// line holds one bin and its window's leakage), while the tones, out of step with the
/// shaft, must be coded anew in every segment: the archive grows with the source.
fn machine(n: usize, fs: f64, sigma: f64, seed: u64) -> Vec<f64> {
    use std::f64::consts::TAU;
    let mut r = rng(seed);
    let noise = Normal::new(0.0, sigma).expect("valid normal");
    let tones: Vec<f64> = (0..40).map(|_| r.random_range(60.0..900.0)).collect();
    (0..n)
        .map(|m| {
            let t = m as f64 / fs;
            let since = t % (1.0 / 25.0);
            let ring = 5.0 * (-since / 0.005).exp() * (TAU * 400.0 * since).sin();
            let lines: f64 = tones
                .iter()
                .enumerate()
                .map(|(k, f)| 0.5 * (TAU * f * t + k as f64).cos())
                .sum();
            2.0 * (TAU * 25.0 * t).cos() + ring + lines + noise.sample(&mut r)
        })
        .collect()
}

fn chan(j: &serde_json::Value, name: &str) -> serde_json::Value {
    j["channels"]
        .as_array()
        .expect("channels")
        .iter()
        .find(|c| c["channel"] == name)
        .unwrap_or_else(|| panic!("channel {name} in {j}"))
        .clone()
}

#[test]
fn survey_measures_the_noise_and_predicts_the_ratio_encode_gives() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    let fs = 2000.0;
    // 600 s: longer than the survey's 8 windows (each 2 × 2¹⁶ samples here), so it samples.
    let n = 600 * 2000;
    let sigmas = [("quiet", 0.02), ("loud", 0.2)];
    let chans: Vec<Chan> = sigmas
        .iter()
        .enumerate()
        .map(|(i, (name, sigma))| {
            Chan::new(
                name,
                VType::F64,
                grid(n, fs),
                &machine(n, fs, *sigma, 40 + i as u64),
            )
        })
        .collect();
    write_wide(
        &src,
        &chans,
        Spec::new(TimeKind::Ts(TimeUnit::Nanosecond, None)),
        "time",
    );
    let svg = s.path("survey.svg");
    let j = s
        .run(&["survey", ps(&src), "--json", "--svg", ps(&svg)])
        .expect(0)
        .json();
    let text = std::fs::read_to_string(&svg).expect("survey SVG");
    assert!(
        text.contains("<svg") && text.contains("recommended"),
        "{svg:?}"
    );
    for (name, sigma) in sigmas {
        let c = chan(&j, name);
        let noise = c["noise_rms"].as_f64().unwrap();
        assert!(
            (noise / sigma - 1.0).abs() <= 0.10,
            "{name}: noise {noise} against σ = {sigma}"
        );
        assert_eq!(c["sampled_windows"], 8, "{c}");
        let curve = c["curve"].as_array().unwrap();
        assert!(curve.len() >= 11, "{c}");
        assert!(curve
            .iter()
            .all(|p| p["budget_rms"].is_f64() && p["ratio"].is_f64()));
        // The ratio grows with the budget (within 2 %, the coder's steps).
        for w in curve.windows(2) {
            assert!(
                w[1]["ratio"].as_f64().unwrap() >= 0.98 * w[0]["ratio"].as_f64().unwrap(),
                "{name}: {w:?}"
            );
        }
        let budget = c["recommended_budget_rms"].as_f64().unwrap();
        let predicted = c["recommended_ratio"].as_f64().unwrap();
        let arch = s.path(&format!("{name}.cyclarc.parquet"));
        s.encode(
            &src,
            &arch,
            &["--channels", name, "--budget-rms", &budget.to_string()],
        )
        .expect(0);
        let i = s.run(&["inspect", ps(&arch), "--json"]).expect(0).json();
        let got = chan(&i, name)["ratio_vs_f32"].as_f64().unwrap();
        assert!(
            (predicted / got - 1.0).abs() <= 0.15,
            "{name}: survey predicted {predicted:.2}×, encode gave {got:.2}×"
        );
    }
}

/// IEEE 519 THD of one snapshot of exactly 50 cycles: RMS of harmonics 2 … 50 (below
/// Nyquist) over the fundamental, from rustfft's DFT.
fn thd_ieee519(x: &[f64], cycles: usize) -> f64 {
    use rustfft::num_complex::Complex;
    let mut buf: Vec<Complex<f64>> = x.iter().map(|&v| Complex::new(v, 0.0)).collect();
    rustfft::FftPlanner::new()
        .plan_fft_forward(buf.len())
        .process(&mut buf);
    let a = |h: usize| buf[h * cycles].norm();
    let harmonics: f64 = (2..=50)
        .filter(|h| h * cycles < x.len() / 2)
        .map(|h| a(h).powi(2))
        .sum();
    harmonics.sqrt() / a(1)
}

#[test]
fn trend_recovers_a_growing_harmonic_and_ieee519_thd() {
    // A day of 1 s snapshots every 30 min (49), 2 kHz, 50 Hz line: the 5th harmonic grows
    // from 2 to 8 (0.25 per hour), the 3rd stays at 3.
    let s = Lab::new();
    let src = s.path("day.parquet");
    let fs = 2000.0;
    let (mut times, mut values) = (Vec::new(), Vec::new());
    let mut snapshots = Vec::new();
    for k in 0..49i64 {
        let t0 = T0 + k * 1_800_000_000_000;
        let hours = k as f64 * 0.5;
        let a5 = 2.0 + 0.25 * hours;
        let snap: Vec<f64> = (0..2000)
            .map(|m| {
                let w = std::f64::consts::TAU * 50.0 * m as f64 / fs;
                100.0 * w.cos() + 3.0 * (3.0 * w + 0.5).cos() + a5 * (5.0 * w - 0.7).cos()
            })
            .collect();
        times.extend((0..2000).map(|m| t0 + m * 500_000));
        values.extend_from_slice(&snap);
        snapshots.push((t0, snap));
    }
    write_wide(
        &src,
        &[Chan::new("ia", VType::F64, times, &values)],
        Spec::new(TimeKind::Ts(TimeUnit::Nanosecond, None)),
        "time",
    );
    let arch = s.path("day.cyclarc.parquet");
    s.encode(
        &src,
        &arch,
        &[
            "--budget-rel",
            "0.0005",
            "--fundamental-hz",
            "50",
            "--cycles-per-segment",
            "50",
        ],
    )
    .expect(0);
    let j = s
        .run(&["trend", ps(&arch), "--harmonics", "1,3,5", "--json"])
        .expect(0)
        .json();
    let points = j["points"].as_array().expect("points");
    assert_eq!(points.len(), 49, "one point per snapshot");
    // Least-squares slope of the 5th harmonic's amplitude over time (hours).
    let xy: Vec<(f64, f64)> = points
        .iter()
        .map(|p| {
            let t = (p["start_ns"].as_i64().unwrap() - T0) as f64 / 3.6e12;
            let h5 = p["harmonics"]
                .as_array()
                .unwrap()
                .iter()
                .find(|h| h["harmonic"] == 5)
                .expect("h5")["amplitude"]
                .as_f64()
                .unwrap();
            (t, h5)
        })
        .collect();
    let n = xy.len() as f64;
    let (mx, my) = (
        xy.iter().map(|p| p.0).sum::<f64>() / n,
        xy.iter().map(|p| p.1).sum::<f64>() / n,
    );
    let slope = xy.iter().map(|p| (p.0 - mx) * (p.1 - my)).sum::<f64>()
        / xy.iter().map(|p| (p.0 - mx).powi(2)).sum::<f64>();
    assert!(
        (slope / 0.25 - 1.0).abs() <= 0.01,
        "slope {slope} per hour, put in 0.25"
    );
    for (p, (t0, snap)) in points.iter().zip(&snapshots) {
        assert_eq!(p["start_ns"].as_i64(), Some(*t0));
        let want = thd_ieee519(snap, 50);
        let got = p["thd"].as_f64().unwrap();
        // What the budget allows (Parseval, derived here): an error of RMS ε moves the peak
        // amplitudes a_h of the harmonics by at most √2·ε together (Σ Δa_h² ≤ 2ε²), so
        // THD = ‖a_2…50‖/a_1 moves by at most √2·ε·√(1 + THD²)/(a_1 − √2·ε); a coder that
        // spends the budget on the few harmonic bins there are comes near that.
        let rms = (snap.iter().map(|v| v * v).sum::<f64>() / snap.len() as f64).sqrt();
        let eps = 0.0005 * rms * (1.0 + 1e-6);
        let bound = 2f64.sqrt() * eps * (1.0 + want * want).sqrt() / (100.0 - 2f64.sqrt() * eps);
        assert!(
            (got - want).abs() <= bound,
            "THD {got} against {want}: off by more than the budget allows ({bound})"
        );
        // And well inside 2 % of it: the trend is a usable THD record.
        assert!((got / want - 1.0).abs() <= 0.02, "THD {got} against {want}");
    }
    // The other outputs hold the same points.
    let csv = s.run(&["trend", ps(&arch), "--csv"]);
    let text = csv.expect(0).stdout.clone();
    assert!(
        text.starts_with("channel,time,time_ns,samples,basis,fundamental_hz,rms,thd,h1_amplitude")
    );
    assert_eq!(text.lines().count(), 50, "header and 49 rows");
    let pq = s.path("trend.parquet");
    let svg = s.path("trend.svg");
    s.run(&["trend", ps(&arch), "--parquet", ps(&pq), "--svg", ps(&svg)])
        .expect(0);
    assert_eq!(read_table(&pq).batch.num_rows(), 49);
    assert!(std::fs::read_to_string(&svg)
        .unwrap()
        .contains("Harmonic 5"));
    s.run(&["trend", ps(&arch), "--channel", "nope"])
        .expect(2)
        .says(&["nope"]);
}

#[test]
fn a_line_locked_to_the_sampling_clock_is_reported_with_its_fundamental_and_thd() {
    // 50 Hz at 10 kHz: exactly 200 samples a cycle, harmonics 3 and 5 (amplitudes 0.8 and
    // 0.4 on 10), noise 100 dB below; the fundamental is not given. Fixed blocks of whole
    // cycles and periodic segments then code alike, and either way the archive must say
    // 50 Hz and keep THD: IEEE 519's definition over the amplitudes put in,
    // √(0.8² + 0.4²)/10.
    let s = Lab::new();
    let src = s.path("line.parquet");
    let (fs, n) = (10_000.0, 60_000);
    write_wide(
        &src,
        &[Chan::new(
            "ia",
            VType::F64,
            grid(n, fs),
            &noisy(n, fs, 7e-5, 9),
        )],
        Spec::new(TimeKind::Ts(TimeUnit::Nanosecond, None)),
        "time",
    );
    let arch = s.path("line.cyclarc.parquet");
    s.encode(&src, &arch, &["--budget-rel", "0.0005"]).expect(0);
    let meta = s.run(&["inspect", ps(&arch), "--meta"]).expect(0).json();
    let c = &meta["channels"][0];
    assert_eq!(c["fundamental"], "estimated", "{c}");
    let hz = c["fundamental_hz"].as_f64().expect("fundamental_hz");
    assert!((hz - 50.0).abs() <= 0.01, "fundamental {hz} Hz, put in 50");
    let want = (0.8f64.powi(2) + 0.4f64.powi(2)).sqrt() / 10.0;
    let j = s.run(&["trend", ps(&arch), "--json"]).expect(0).json();
    let points = j["points"].as_array().expect("points");
    assert!(!points.is_empty());
    for p in points {
        let got = p["thd"].as_f64().unwrap_or_else(|| panic!("no THD in {p}"));
        // The budget (0.05 % of RMS) allows THD to move by ≈ 0.6 % (the Parseval bound of
        // the trend test above); 2 % as there.
        assert!((got / want - 1.0).abs() <= 0.02, "THD {got} against {want}");
        let f = p["fundamental_hz"].as_f64().expect("fundamental_hz");
        assert!((f - 50.0).abs() <= 0.01, "{p}");
    }
}

fn chromium() -> Option<&'static str> {
    ["chromium", "chromium-browser"].into_iter().find(|b| {
        Command::new(b)
            .arg("--version")
            .output()
            .is_ok_and(|o| o.status.success())
    })
}

/// Headless Chromium on a file, with a fresh profile and no background connections (this
/// machine's network is closed; common practice for headless runs).
fn headless(browser: &str, page: &Path, extra: &[&str]) -> std::process::Output {
    let profile = tempfile::tempdir().expect("a profile folder");
    Command::new(browser)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--hide-scrollbars",
            "--no-first-run",
            "--disable-quic",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
        ])
        .arg(format!("--user-data-dir={}", profile.path().display()))
        .args(extra)
        .arg(format!("file://{}", page.display()))
        .output()
        .expect("chromium runs")
}

#[test]
fn report_renders_in_a_real_browser_with_every_channel_and_figure() {
    let Some(browser) = chromium() else {
        // CI installs Chromium and sets this, so that the check cannot pass by being skipped.
        assert!(
            std::env::var_os("CYCLARC_REQUIRE_BROWSER").is_none(),
            "CYCLARC_REQUIRE_BROWSER is set but chromium is not installed"
        );
        eprintln!("NOTE: chromium is not installed; the browser check of `report` is skipped");
        return;
    };
    let s = Lab::new();
    let src = s.path("pump.parquet");
    let (fs, n) = (5000.0, 20_000);
    let chans = [
        Chan::new("pump.de", VType::F32, grid(n, fs), &noisy(n, fs, 0.05, 7)),
        Chan::new("pump.nde", VType::F32, grid(n, fs), &noisy(n, fs, 0.1, 8)),
    ];
    write_wide(
        &src,
        &chans,
        Spec::new(TimeKind::Ts(TimeUnit::Nanosecond, None)),
        "time",
    );
    let arch = s.path("pump.cyclarc.parquet");
    s.encode(&src, &arch, &["--budget-rel", "0.02"]).expect(0);
    let page = s.path("report.html");
    s.run(&["report", ps(&arch), "--out", ps(&page)]).expect(0);
    let png = s.path("shot.png");
    let shot = headless(
        browser,
        &page,
        &[
            "--window-size=1000,1400",
            &format!("--screenshot={}", png.display()),
        ],
    );
    assert!(
        png.exists(),
        "no screenshot: {}",
        String::from_utf8_lossy(&shot.stderr)
    );
    let decoder = png::Decoder::new(std::io::BufReader::new(std::fs::File::open(&png).unwrap()));
    let mut reader = decoder.read_info().expect("a PNG");
    let mut buf = vec![0; reader.output_buffer_size()];
    let info = reader.next_frame(&mut buf).expect("a frame");
    assert_eq!((info.width, info.height), (1000, 1400), "the window's size");
    let px = info.buffer_size() / (info.width * info.height) as usize;
    let inked = buf[..info.buffer_size()]
        .chunks(px)
        .filter(|p| p[..3].iter().any(|&c| c < 200))
        .count();
    let share = inked as f64 / (info.width * info.height) as f64;
    assert!(
        share > 0.01,
        "the page rendered blank ({:.2} % inked)",
        share * 100.0
    );
    let dom = headless(browser, &page, &["--dump-dom"]);
    let dom = String::from_utf8_lossy(&dom.stdout);
    let i = s.run(&["inspect", ps(&arch), "--json"]).expect(0).json();
    for name in ["pump.de", "pump.nde"] {
        let c = chan(&i, name);
        let ratio = format!("{:.1}", c["ratio_vs_f32"].as_f64().unwrap());
        let samples = c["samples"].to_string();
        for want in [name, ratio.as_str(), samples.as_str()] {
            assert!(dom.contains(want), "the rendered page lacks `{want}`");
        }
    }
    assert!(dom.contains("Failures") && dom.contains("Fundamental track"));
}

#[test]
fn run_writes_its_report_with_settings_and_failures() {
    let s = Lab::new();
    let (fs, n) = (5000.0, 10_000);
    let src = s.path("pump.parquet");
    let chans = [Chan::new(
        "pump.de",
        VType::F32,
        grid(n, fs),
        &noisy(n, fs, 0.05, 9),
    )];
    write_wide(
        &src,
        &chans,
        Spec::new(TimeKind::Ts(TimeUnit::Nanosecond, None)),
        "time",
    );
    // A second source that is not Parquet: its failure heads the page.
    std::fs::write(s.path("broken.parquet"), b"not parquet").unwrap();
    let job = s.path("job.toml");
    std::fs::write(
        &job,
        "output = \"out\"\n[encode]\nbudget_rel = 0.02\n[[source]]\npaths = [\"*.parquet\"]\n",
    )
    .unwrap();
    let page = s.path("run.html");
    s.run(&["run", ps(&job), "--report", ps(&page)]).expect(2);
    let html = std::fs::read_to_string(&page).expect("the report");
    for want in ["Failures", "broken.parquet", "pump.de", "budget", "<svg"] {
        assert!(html.contains(want), "the run report lacks `{want}`");
    }
    assert!(
        !html.contains("<script src"),
        "nothing is loaded from elsewhere"
    );
}

#[test]
fn a_pipeline_budget_of_survey_records_each_channels_recommendation() {
    let s = Lab::new();
    let (fs, n) = (5000.0, 20_000);
    let src = s.path("pump.parquet");
    let chans = [
        Chan::new("de", VType::F64, grid(n, fs), &machine(n, fs, 0.05, 11)),
        Chan::new("nde", VType::F64, grid(n, fs), &machine(n, fs, 0.2, 12)),
    ];
    write_wide(
        &src,
        &chans,
        Spec::new(TimeKind::Ts(TimeUnit::Nanosecond, None)),
        "time",
    );
    let survey = s.run(&["survey", ps(&src), "--json"]).expect(0).json();
    let job = s.path("job.toml");
    // `nde` keeps the rule written for it; `de` gets the survey's recommendation.
    std::fs::write(
        &job,
        "output = \"out\"\nverify = true\n[encode]\nbudget = \"survey\"\n\
         [[encode.budgets]]\nchannels = \"nde\"\nrms = 0.5\n\
         [[source]]\npaths = [\"pump.parquet\"]\n",
    )
    .unwrap();
    s.run(&["run", ps(&job)]).expect(0);
    let meta = s
        .run(&["inspect", ps(&s.path("out/pump.cyclarc.parquet")), "--meta"])
        .expect(0)
        .json();
    let settings = &meta["settings"];
    assert_eq!(settings["budget_from_survey"], true, "{settings}");
    let rules = settings["budget_rules"].as_array().expect("rules");
    let rule = |name: &str| {
        rules
            .iter()
            .find(|r| r[0] == name)
            .unwrap_or_else(|| panic!("no rule for {name}: {settings}"))[1]["Absolute"]
            .as_f64()
            .unwrap()
    };
    assert_eq!(rule("nde"), 0.5);
    let want = chan(&survey, "de")["recommended_budget_rms"]
        .as_f64()
        .unwrap();
    assert_eq!(rule("de"), want);
    // Both kinds of budget at once are refused, naming the option.
    s.encode(
        &src,
        &s.path("x.cyclarc.parquet"),
        &["--budget", "survey", "--budget-rms", "1"],
    )
    .expect(2);
}
