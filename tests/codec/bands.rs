//! Protected bands: the band helpers against published kinematics, and a motor current
//! whose rotor-bar sidebands survive a budget that would otherwise drop them, measured with
//! a direct DFT computed here (not the library's FFT).
use crate::support::codec::*;
use crate::support::signals::*;
use cyclarc::codec::bands::{rotor_bar_sidebands_hz, BearingGeometry};
use cyclarc::codec::{encode_run, RunParams};
use cyclarc::model::ValueType;
use cyclarc::options::{EncodeOptions, ProtectSpec, RotorBarSpec};
use cyclarc::signal::RealFft;
use rand_distr::{Distribution, Normal};

#[test]
fn bearing_defect_orders_give_the_worked_example_of_the_kinematic_formulas() {
    // REFERENCE-FACTS, "Vibration": standard bearing kinematics (Randall, Vibration-based
    // Condition Monitoring, 2011); worked example 1800 rpm, N = 8, d = 10, D = 50, α = 0 →
    // FTF 12, BPFO 96, BPFI 144, BSF 72 Hz.
    let shaft_hz = 1800.0 / 60.0;
    let o = BearingGeometry {
        elements: 8,
        ball_diameter: 10.0,
        pitch_diameter: 50.0,
        contact_angle_deg: 0.0,
    }
    .defect_orders()
    .expect("a bearing");
    for (got, want) in [
        (o.ftf, 12.0),
        (o.bpfo, 96.0),
        (o.bpfi, 144.0),
        (o.bsf, 72.0),
    ] {
        assert!(
            (got * shaft_hz - want).abs() < 1e-9,
            "{got} × {shaft_hz} vs {want}"
        );
    }
}

#[test]
fn rotor_bar_sidebands_of_a_four_pole_motor_at_1455_rpm_are_47_and_53_hz() {
    // REFERENCE-FACTS, "Motor current": slip s = (n_s − n)/n_s with n_s = 120 f / P; broken
    // rotor bars show sidebands at (1 ± 2ks)·f; 4-pole, 50 Hz, 1455 rpm → s = 0.03, 47/53 Hz.
    let (f, poles, rpm) = (50.0, 4.0, 1455.0);
    let ns = 120.0 * f / poles;
    let s = (ns - rpm) / ns;
    let sb = rotor_bar_sidebands_hz(f, s, 1);
    assert_eq!(sb.len(), 2);
    assert!(
        (sb[0] - 47.0).abs() < 1e-9 && (sb[1] - 53.0).abs() < 1e-9,
        "{sb:?}"
    );
}

/// Peak amplitude of the tone at `hz` in `x` (sampled at `fs`), by a direct DFT sum:
/// 2|Σ x_m e^(−2πi·f·m/fs)|/N (the amplitude of a real cosine on an integer bin is A·N/2,
/// REFERENCE-FACTS "DFT facts").
fn dft_amplitude(x: &[f64], hz: f64, fs: f64) -> f64 {
    let (mut re, mut im) = (0.0, 0.0);
    for (m, &v) in x.iter().enumerate() {
        let a = -std::f64::consts::TAU * hz * m as f64 / fs;
        re += v * a.cos();
        im += v * a.sin();
    }
    2.0 * (re * re + im * im).sqrt() / x.len() as f64
}

#[test]
fn rotor_bar_sidebands_keep_their_amplitude_under_a_budget_that_drops_them() {
    // 50 Hz line, 100 A peak, 5th harmonic at 4 %, sidebands at 47/53 Hz at 0.5 % (−46 dB)
    // and noise; 1 s segments (50 cycles at a given 50 Hz) so bins are 1 Hz apart and the
    // sidebands sit on bins 47 and 53. Invented test signal.
    let fs = 5000.0;
    let n = 50_000;
    let mut r = rng(47);
    let noise = Normal::new(0.0, 0.05).expect("normal");
    let x: Vec<f64> = (0..n)
        .map(|m| {
            let t = m as f64 / fs;
            let w = |f: f64, ph: f64| (std::f64::consts::TAU * f * t + ph).cos();
            100.0 * w(50.0, 0.0)
                + 4.0 * w(250.0, 0.3)
                + 0.5 * w(47.0, 1.0)
                + 0.5 * w(53.0, -0.4)
                + noise.sample(&mut r)
        })
        .collect();
    let options = |protect: Option<ProtectSpec>| EncodeOptions {
        budget_rel: Some(0.01),
        fundamental: Some("50".into()),
        cycles_per_segment: Some(50),
        protect,
        ..Default::default()
    };
    let sidebands = ProtectSpec {
        rotor_bars: Some(RotorBarSpec {
            line_hz: 50.0,
            slip: 0.03,
            pairs: None,
            half_width_hz: Some(0.5),
        }),
        ..Default::default()
    };
    let run = run_of(&x, fs);
    let decode = |o: EncodeOptions| {
        let s = settings(o);
        let p = RunParams::new("ia", ValueType::F64, Some(fs), &s.codec);
        let enc = encode_run(&run, &p).unwrap();
        (decode_run(&enc, RealFft::shared()), enc.payload_bytes())
    };
    let (plain, plain_bytes) = decode(options(None));
    let (kept, kept_bytes) = decode(options(Some(sidebands)));
    for (d, k) in plain.iter().zip(&kept) {
        assert_eq!(d.start, k.start);
        let src = &x[d.start..d.start + d.values.len()];
        assert_eq!(src.len(), 5000, "1 s segments");
        for hz in [47.0, 53.0] {
            let truth = dft_amplitude(src, hz, fs);
            let dropped = dft_amplitude(&d.values, hz, fs);
            let held = dft_amplitude(&k.values, hz, fs);
            // The 1 % budget (0.71 A RMS) lets the 0.35 A RMS sideband go.
            assert!(
                dropped < 0.5 * truth,
                "{hz} Hz unprotected: {dropped} of {truth}"
            );
            assert!(
                (held - truth).abs() <= 0.01 * truth,
                "{hz} Hz protected: {held} of {truth}"
            );
        }
        assert!(rms_error(src, &k.values) <= 0.01 * finite_rms_of(src));
    }
    println!("rotor-bar sidebands protected: payload {plain_bytes} -> {kept_bytes} B");
}
