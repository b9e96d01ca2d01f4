//! The run report: one self-contained HTML page (inline CSS and SVG, one inline script that
//! sorts the table; nothing loaded from elsewhere) over one or more archives — the run's
//! settings and failures at the top, a table of every channel, then per channel its
//! fundamental track, its order over time and the distribution of its error over budget,
//! with events and peak-guard corrections where there are any.
//!
//! Does not: compute results (it formats what the archive and the jobs report).

use std::fmt::Write as _;
use std::path::PathBuf;

use html_escape::encode_text as esc;

use crate::archive::{segment_list, Archive, DigestPolicy, SegmentInfo};
use crate::error::Result;
use crate::jobs::pipeline::{RunReport, SourceOutcome};
use crate::plot::{panels_svg, Panel, Series};
use crate::report::{bytes, inspect, utc, ChannelInspect};

/// Bins of the error-over-budget histogram, over [0, 1].
const USE_BINS: usize = 10;

const STYLE: &str = "body{font-family:sans-serif;margin:24px auto;max-width:1100px;color:#222}\
h1{font-size:22px;margin-bottom:4px}h2{font-size:18px;margin-top:32px;border-bottom:1px solid #ccc}\
h3{font-size:15px;margin:18px 0 4px}table{border-collapse:collapse;font-size:13px;width:100%}\
th,td{padding:4px 8px;border-bottom:1px solid #e4e4e4;text-align:right}td.n{white-space:nowrap}\
th:first-child,td:first-child,th:nth-child(2),td:nth-child(2){text-align:left}\
th{cursor:pointer;background:#f3f3f3;user-select:none}th:hover{background:#e6eef6}\
.bad{color:#d55e00;font-weight:bold}.note{color:#555;font-size:13px}\
pre{background:#f7f7f7;padding:8px;font-size:12px;overflow-x:auto}";

/// Sorts the table by the clicked column: numbers by value, text by text; a second click
/// reverses.
const SORT_SCRIPT: &str = "document.querySelectorAll('table.sortable th').forEach(function(th,i){\
th.addEventListener('click',function(){var t=th.closest('table'),b=t.tBodies[0],\
r=Array.from(b.rows),d=th.dataset.dir==='a'?-1:1;th.dataset.dir=d===1?'a':'d';\
r.sort(function(x,y){var p=x.cells[i].dataset.v||x.cells[i].textContent,\
q=y.cells[i].dataset.v||y.cells[i].textContent,m=parseFloat(p),n=parseFloat(q);\
return (isNaN(m)||isNaN(n)?p.localeCompare(q):m-n)*d;});r.forEach(function(e){b.appendChild(e);});});});";

struct Opened {
    archive: Archive,
    segments: Vec<SegmentInfo>,
    channels: Vec<ChannelInspect>,
}

/// The page for a pipeline run: its archives (archived now or skipped as already done) and
/// its failures.
pub fn run_page(run: &RunReport) -> Result<String> {
    let mut archives = Vec::new();
    let mut failures = Vec::new();
    for s in &run.sources {
        match s {
            SourceOutcome::Archived { summary, .. } => archives.push(summary.archive.clone()),
            SourceOutcome::Skipped { archive, .. } => archives.push(archive.clone()),
            SourceOutcome::Failed { source, error, .. } => {
                failures.push(format!("{}: {error}", source.display()))
            }
        }
    }
    page(
        &format!("Run of {}", run.pipeline.display()),
        &archives,
        &failures,
    )
}

/// The page for archives, with a title and failures to show at the top.
pub fn page(title: &str, archives: &[PathBuf], failures: &[String]) -> Result<String> {
    let mut opened = Vec::new();
    for p in archives {
        let archive = Archive::open(p, DigestPolicy::Skip)?;
        let segments = segment_list(&archive)?;
        let channels = inspect(&archive, segments.clone(), false).channels;
        opened.push(Opened {
            archive,
            segments,
            channels,
        });
    }
    let mut h = String::new();
    let _ = write!(
        h,
        "<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\">\
         <title>cyclarc: {t}</title><style>{STYLE}</style></head><body>\
         <h1>cyclarc: {t}</h1><p class=\"note\">{n} archive(s), {c} channel(s); written by {w}</p>",
        t = esc(title),
        n = opened.len(),
        c = opened.iter().map(|o| o.channels.len()).sum::<usize>(),
        w = esc(&format!("cyclarc {}", env!("CARGO_PKG_VERSION"))),
    );
    h.push_str("<h2>Failures</h2>");
    if failures.is_empty() {
        h.push_str("<p>None.</p>");
    } else {
        h.push_str("<ul>");
        for f in failures {
            let _ = write!(h, "<li class=\"bad\">{}</li>", esc(f));
        }
        h.push_str("</ul>");
    }
    h.push_str("<h2>Settings</h2>");
    // Archives written with the same settings share one listing.
    let mut groups: Vec<(String, Vec<String>)> = Vec::new();
    for o in &opened {
        let settings = serde_json::to_string_pretty(&o.archive.meta.settings).unwrap_or_default();
        let name = o.archive.path.display().to_string();
        match groups.iter_mut().find(|g| g.0 == settings) {
            Some(g) => g.1.push(name),
            None => groups.push((settings, vec![name])),
        }
    }
    for (settings, names) in &groups {
        let _ = write!(
            h,
            "<details><summary>{}</summary><pre>{}</pre></details>",
            esc(&names.join(", ")),
            esc(settings)
        );
    }
    summary_table(&mut h, &opened);
    for o in &opened {
        for c in &o.channels {
            channel_section(&mut h, o, c);
        }
    }
    let _ = writeln!(h, "<script>{SORT_SCRIPT}</script></body></html>");
    Ok(h)
}

fn summary_table(h: &mut String, opened: &[Opened]) {
    h.push_str(
        "<h2>Channels</h2><p class=\"note\">Click a heading to sort.</p>\
         <table class=\"sortable\"><thead><tr><th>archive</th><th>channel</th><th>samples</th>\
         <th>bytes</th><th>ratio vs f32</th><th>worst error / budget</th><th>order (median)</th>\
         <th>fundamental</th><th>events</th><th>peak-corrected samples</th></tr></thead><tbody>",
    );
    for o in opened {
        let name = o
            .archive
            .path
            .file_name()
            .map(|n| {
                let n = n.to_string_lossy();
                n.strip_suffix(".cyclarc.parquet").unwrap_or(&n).to_string()
            })
            .unwrap_or_default();
        for c in &o.channels {
            let worst_class = if c.worst_error_over_budget > 1.0 {
                " class=\"bad\""
            } else {
                ""
            };
            let _ = write!(
                h,
                "<tr><td>{a}</td><td>{ch}</td><td class=\"n\">{s}</td><td class=\"n\" data-v=\"{b}\">{bt}</td>\
                 <td class=\"n\">{r:.1}</td><td{wc}>{w:.3}</td><td class=\"n\">{ord}</td><td>{f}</td><td>{e}</td><td>{g}</td></tr>",
                a = esc(&name),
                ch = esc(&c.channel),
                s = c.samples,
                b = c.bytes,
                bt = esc(&bytes(c.bytes)),
                r = c.ratio_vs_f32,
                wc = worst_class,
                w = c.worst_error_over_budget,
                ord = c.order.map_or("-".into(), |o| o.1.to_string()),
                f = esc(&c.fundamental),
                e = c.events.as_ref().map_or("-".into(), |e| e.len().to_string()),
                g = c.corrected_samples.map_or("-".into(), |n| n.to_string()),
            );
        }
    }
    h.push_str("</tbody></table>");
}

fn channel_section(h: &mut String, o: &Opened, c: &ChannelInspect) {
    let rows: Vec<_> = o
        .archive
        .rows
        .iter()
        .filter(|r| r.channel == c.channel)
        .collect();
    let segs: Vec<&SegmentInfo> = o
        .segments
        .iter()
        .filter(|s| s.channel == c.channel)
        .collect();
    let t0 = rows.iter().map(|r| r.start_ns).min().unwrap_or(0);
    let secs = |ns: i64| (ns - t0) as f64 / 1e9;
    let x_label = format!("time since {} (s)", utc(t0));
    let _ = write!(
        h,
        "<h2>{ch}</h2><p>{s} samples in {n} segments; {b}, {r:.1}× smaller than raw f32; \
         worst error {w:.3} of its budget; basis {basis}.</p>",
        ch = esc(&c.channel),
        s = c.samples,
        n = c.segments,
        b = esc(&bytes(c.bytes)),
        r = c.ratio_vs_f32,
        w = c.worst_error_over_budget,
        basis = esc(&c
            .basis
            .iter()
            .map(|(k, v)| format!("{k} {v}"))
            .collect::<Vec<_>>()
            .join(", ")),
    );
    let mut hist = [0usize; USE_BINS + 1];
    for r in &rows {
        let u = r.budget_use as f64;
        let b = if u > 1.0 {
            USE_BINS
        } else {
            ((u * USE_BINS as f64) as usize).min(USE_BINS - 1)
        };
        hist[b] += 1;
    }
    let mut panels = vec![
        Panel {
            title: "Fundamental track".into(),
            x_label: x_label.clone(),
            y_label: "fundamental (Hz)".into(),
            log_x: false,
            log_y: false,
            series: vec![Series {
                name: "fundamental".into(),
                points: rows
                    .iter()
                    .filter_map(|r| Some((secs(r.start_ns), r.fundamental_hz? as f64)))
                    .collect(),
            }],
            markers: Vec::new(),
            bars: false,
            points_only: false,
        },
        Panel {
            title: "Basis and order of each segment (time-domain and lossless segments at 0)"
                .into(),
            x_label: x_label.clone(),
            y_label: "order L (bins kept)".into(),
            log_x: false,
            log_y: false,
            series: {
                // One series of points per basis, in the order bases first appear.
                let mut by_basis: Vec<Series> = Vec::new();
                for s in &segs {
                    let point = (secs(s.start_ns), s.order.map_or(0.0, f64::from));
                    match by_basis.iter_mut().find(|b| b.name == s.basis) {
                        Some(b) => b.points.push(point),
                        None => by_basis.push(Series {
                            name: s.basis.to_string(),
                            points: vec![point],
                        }),
                    }
                }
                by_basis
            },
            markers: Vec::new(),
            bars: false,
            points_only: true,
        },
        Panel {
            title: "Error over budget: rows per bin (the last bin is above 1)".into(),
            x_label: "error / budget (−)".into(),
            y_label: "rows (count)".into(),
            log_x: false,
            log_y: false,
            series: vec![Series {
                name: "rows".into(),
                points: hist
                    .iter()
                    .enumerate()
                    .map(|(i, &n)| ((i as f64 + 0.5) / USE_BINS as f64, n as f64))
                    .collect(),
            }],
            markers: Vec::new(),
            bars: true,
            points_only: false,
        },
    ];
    if segs.iter().any(|s| s.corrected.is_some()) {
        panels.push(Panel {
            title: "Peak guard: corrected samples per segment".into(),
            x_label: x_label.clone(),
            y_label: "corrected samples (count)".into(),
            log_x: false,
            log_y: false,
            series: vec![Series {
                name: "corrected".into(),
                points: segs
                    .iter()
                    .filter_map(|s| Some((secs(s.start_ns), s.corrected? as f64)))
                    .collect(),
            }],
            markers: Vec::new(),
            bars: false,
            points_only: false,
        });
    }
    h.push_str(&panels_svg(&panels));
    if let Some(ev) = &c.events {
        let list: Vec<String> = ev.iter().take(20).map(|&t| utc(t)).collect();
        let _ = write!(
            h,
            "<p>Events: {} row(s){}{}</p>",
            ev.len(),
            if list.is_empty() { "" } else { ", from " },
            esc(&list.join(", "))
        );
    }
}
