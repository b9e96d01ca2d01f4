//! The charts `survey` and `trend` draw, as panels of series for [`crate::plot`].

use crate::jobs::survey::SurveyReport;
use crate::jobs::trend::{TrendPoint, TrendReport};
use crate::plot::{Marker, Panel, Series};

use super::text::utc;

/// `trend --svg`: one panel per quantity (fundamental, RMS, THD, each harmonic's
/// amplitude), one line per channel, time from the first point on x (in s, min or h).
pub fn trend_panels(r: &TrendReport) -> Vec<Panel> {
    let t0 = r.points.iter().map(|p| p.start_ns).min().unwrap_or(0);
    let t1 = r.points.iter().map(|p| p.start_ns).max().unwrap_or(0);
    // Seconds, minutes or hours on x, whichever keeps the span's numbers readable.
    let (unit_ns, unit) = match (t1 - t0) as f64 / 1e9 {
        s if s < 300.0 => (1e9, "s"),
        s if s < 3.0 * 3600.0 => (60e9, "min"),
        _ => (3.6e12, "h"),
    };
    let since = |ns: i64| (ns - t0) as f64 / unit_ns;
    let mut channels: Vec<&str> = Vec::new();
    for p in &r.points {
        if !channels.contains(&p.channel.as_str()) {
            channels.push(&p.channel);
        }
    }
    let unit_list = "channel units";
    let x_label = format!("time since {} ({unit})", utc(t0));
    let panel =
        |title: String, y_label: String, value: &dyn Fn(&TrendPoint) -> Option<f64>| Panel {
            title,
            x_label: x_label.clone(),
            y_label,
            log_x: false,
            log_y: false,
            series: channels
                .iter()
                .map(|c| Series {
                    name: c.to_string(),
                    points: r
                        .points
                        .iter()
                        .filter(|p| p.channel == *c)
                        .filter_map(|p| value(p).map(|v| (since(p.start_ns), v)))
                        .collect(),
                })
                .collect(),
            markers: Vec::new(),
            bars: false,
            points_only: false,
        };
    let mut out = vec![
        panel("Fundamental".into(), "frequency (Hz)".into(), &|p| {
            Some(p.fundamental_hz)
        }),
        panel("RMS".into(), format!("RMS ({unit_list})"), &|p| Some(p.rms)),
        panel("THD (IEEE 519)".into(), "THD (%)".into(), &|p| {
            p.thd.map(|t| t * 100.0)
        }),
    ];
    for &h in &r.harmonics {
        out.push(panel(
            format!("Harmonic {h}"),
            format!("peak amplitude ({unit_list})"),
            &move |p| {
                p.harmonics
                    .iter()
                    .find(|q| q.harmonic == h)
                    .map(|q| q.amplitude)
            },
        ));
    }
    out
}

/// `survey --svg`: one panel per channel, ratio against budget on log axes, the noise floor
/// and the recommendation marked.
pub fn survey_panels(r: &SurveyReport) -> Vec<Panel> {
    r.channels
        .iter()
        .map(|c| Panel {
            title: format!("{}: ratio against budget", c.channel),
            x_label: "budget, RMS (channel units)".into(),
            y_label: "ratio vs raw f32 (×)".into(),
            log_x: true,
            log_y: true,
            series: vec![Series {
                name: "estimated ratio".into(),
                points: c.curve.iter().map(|p| (p.budget_rms, p.ratio)).collect(),
            }],
            markers: [
                (c.noise_rms > 0.0).then(|| Marker {
                    x: c.noise_rms,
                    label: format!("noise floor {:.4}", c.noise_rms),
                }),
                Some(Marker {
                    x: c.recommended_budget_rms,
                    label: format!("recommended {:.4}", c.recommended_budget_rms),
                }),
            ]
            .into_iter()
            .flatten()
            .collect(),
            bars: false,
            points_only: false,
        })
        .collect()
}
