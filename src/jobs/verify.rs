//! Verify: check an archive's digest and every block's checksum, rebuild every segment, and
//! recompute each segment's RMS error against the source: it must be within the segment's
//! budget, and agree with the recorded error. Every source row must come back with its exact
//! timestamp, and every NaN, ±Inf and null exactly where it was. The largest absolute error is
//! reported; it is checked only where the archive claims a peak guard ([`crate::codec::guard`]):
//! then no sample may exceed the channel's limit, nor the peak its segment records. Without
//! a guard it is information only: an L2 bound does not bound peaks.
//!
//! Does not: encode anything.

use std::collections::HashMap;
use std::path::{Path, PathBuf};

use serde::Serialize;

use crate::archive::{decode_channels, Archive, ChannelMeta, DigestPolicy, DigestState};
use crate::codec::bands::{amplitude, AMPLITUDE_TOLERANCE};
use crate::codec::encode::finite_rms;
use crate::error::{Error, Result};
use crate::fsio::sha256_file;
use crate::model::{ChannelSeries, SpecialKind, ValueType};
use crate::signal::{fill_non_finite, rms_of, Transform};
use crate::source::{assemble, ChannelSamples, Mapping, Source};

/// Relative slack when comparing a recomputed error with the recorded (f32, rounded-up) one:
/// summation order may differ between machines.
pub const RECORDED_ERROR_SLACK: f64 = 1e-6;

/// A problem found by `verify`.
#[derive(Debug, Clone, Serialize)]
pub struct Finding {
    /// Channel, when it applies.
    pub channel: Option<String>,
    /// Segment start (ns), when it applies.
    pub start_ns: Option<i64>,
    /// What is wrong.
    pub what: String,
}

/// Per-channel verification results.
#[derive(Debug, Clone, Serialize)]
pub struct ChannelCheck {
    /// Channel.
    pub channel: String,
    /// Segments checked.
    pub segments: usize,
    /// Samples compared.
    pub samples: usize,
    /// Largest error/budget over lossy segments.
    pub worst_error_over_budget: f64,
    /// Largest RMS error of a segment.
    pub worst_error_rms: f64,
    /// Largest absolute error of any sample (bounded only under a peak guard).
    pub max_abs_error: f64,
    /// The channel's peak limit (peak guard), which every sample was checked against.
    pub peak_max: Option<f64>,
    /// Event segments, checked against their tighter budget.
    pub events: usize,
}

/// The outcome of `verify`.
#[derive(Debug, Clone, Serialize)]
pub struct VerifyReport {
    /// Archive.
    pub archive: PathBuf,
    /// Source.
    pub source: PathBuf,
    /// Whether the digest file was present and matched.
    pub digest: String,
    /// Per channel.
    pub channels: Vec<ChannelCheck>,
    /// Problems (empty means the archive passed).
    pub findings: Vec<Finding>,
}

impl std::fmt::Display for Finding {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        if let Some(c) = &self.channel {
            write!(f, "channel `{c}`: ")?;
        }
        if let Some(t) = self.start_ns {
            write!(f, "segment at {t} ns: ")?;
        }
        f.write_str(&self.what)
    }
}

impl VerifyReport {
    /// Whether everything passed.
    pub fn passed(&self) -> bool {
        self.findings.is_empty()
    }
}

fn finding(channel: Option<&str>, start_ns: Option<i64>, what: String) -> Finding {
    Finding {
        channel: channel.map(str::to_string),
        start_ns,
        what,
    }
}

/// Verify an archive against its source.
pub fn verify(archive_path: &Path, source: &Path, fft: &dyn Transform) -> Result<VerifyReport> {
    let mut findings = Vec::new();
    let archive = Archive::open(archive_path, DigestPolicy::Report)?;
    let digest = archive.digest.name().to_string();
    if archive.digest == DigestState::Mismatch {
        findings.push(finding(
            None,
            None,
            "archive digest differs from the recorded one (file changed or damaged)".into(),
        ));
    }
    let series = match decode_channels(&archive, &[], None, None, fft) {
        Ok(s) => s,
        Err(Error::Damaged { reason, .. }) => {
            findings.push(finding(None, None, reason));
            return Ok(VerifyReport {
                archive: archive_path.to_path_buf(),
                source: source.to_path_buf(),
                digest,
                channels: Vec::new(),
                findings,
            });
        }
        Err(e) => return Err(e),
    };
    let (src_meta_sha, _) = sha256_file(source)?;
    if src_meta_sha != archive.meta.source.sha256 {
        findings.push(finding(
            None,
            None,
            format!(
                "source {} is not the file archived (SHA-256 differs from {})",
                source.display(),
                archive.meta.source.name
            ),
        ));
    }
    let sources = read_source_like(&archive, source)?;
    let mut channels = Vec::new();
    let decoded: HashMap<&str, &ChannelSeries> =
        series.iter().map(|s| (s.name.as_str(), s)).collect();
    for cm in &archive.meta.channels {
        let Some(src) = sources.get(&cm.name) else {
            findings.push(finding(
                Some(&cm.name),
                None,
                "channel missing from the source".into(),
            ));
            continue;
        };
        let Some(dec) = decoded.get(cm.name.as_str()) else {
            findings.push(finding(
                Some(&cm.name),
                None,
                "channel has no segments in the archive".into(),
            ));
            continue;
        };
        channels.push(check_channel(&archive, cm, (src, dec), fft, &mut findings));
    }
    for name in sources.keys() {
        if !archive.meta.channels.iter().any(|c| &c.name == name) {
            findings.push(finding(
                Some(name),
                None,
                "source channel not in the archive".into(),
            ));
        }
    }
    Ok(VerifyReport {
        archive: archive_path.to_path_buf(),
        source: source.to_path_buf(),
        digest,
        channels,
        findings,
    })
}

/// The source's samples per channel, read with the mapping recorded in the archive.
fn read_source_like(archive: &Archive, source: &Path) -> Result<HashMap<String, ChannelSeries>> {
    let schema = &archive.meta.schema;
    let defaults = Mapping::default();
    let mapping = Mapping {
        layout: Some(schema.layout),
        time_column: schema.time_column.clone(),
        channel_column: schema
            .channel_column
            .clone()
            .unwrap_or(defaults.channel_column),
        value_column: schema.value_column.clone().unwrap_or(defaults.value_column),
        channels: Some(
            archive
                .meta
                .channels
                .iter()
                .map(|c| c.name.clone())
                .collect(),
        ),
        sample_rate_hz: None,
        // A part of a plan cut in time holds its window's rows only.
        window: archive
            .meta
            .settings
            .get("window_ns")
            .and_then(|w| serde_json::from_value(w.clone()).ok()),
    };
    let mut src = Source::open(source, &mapping)?;
    let mut samples: HashMap<usize, ChannelSamples> = HashMap::new();
    while let Some(chunks) = src.next_chunks() {
        for c in chunks? {
            samples.entry(c.channel).or_default().extend(c);
        }
    }
    let mut out = HashMap::new();
    for (ci, s) in samples {
        let info = src.schema.channels[ci].clone();
        // Sorting and duplicate checks as the encoder did; one sample rate for all runs.
        let ch = assemble(source, info.clone(), s, Some(1.0))?;
        out.insert(
            info.name.clone(),
            ChannelSeries::joined(&info.name, ch.runs),
        );
    }
    Ok(out)
}

fn check_channel(
    archive: &Archive,
    cm: &ChannelMeta,
    series: (&ChannelSeries, &ChannelSeries),
    fft: &dyn Transform,
    findings: &mut Vec<Finding>,
) -> ChannelCheck {
    let (src, dec) = series;
    let name = src.name.as_str();
    let mut check = ChannelCheck {
        channel: name.to_string(),
        segments: dec.segments.len(),
        samples: dec.times.len(),
        worst_error_over_budget: 0.0,
        worst_error_rms: 0.0,
        max_abs_error: 0.0,
        peak_max: cm.peak_max,
        events: 0,
    };
    if src.times != dec.times {
        let at = src
            .times
            .iter()
            .zip(&dec.times)
            .position(|(a, b)| a != b)
            .unwrap_or(src.times.len().min(dec.times.len()));
        findings.push(finding(
            Some(name),
            None,
            format!(
                "timestamps differ: source has {} rows, archive {}; first difference at sample {at}",
                src.times.len(),
                dec.times.len()
            ),
        ));
        return check;
    }
    if !same_specials(&src.specials, &dec.specials, cm.value_type) {
        findings.push(finding(
            Some(name),
            None,
            "null, NaN or ±Inf values do not come back where they were".into(),
        ));
    }
    for (k, (row, range)) in dec.segments.iter().enumerate() {
        let r = &archive.rows[*row];
        let error_at = |j: usize| {
            let i = range.start + j;
            let (x, y) = (src.values[i], dec.values[i]);
            x.is_finite().then_some(y - x)
        };
        let err = rms_of(range.len(), error_at);
        let max_abs = (0..range.len())
            .filter_map(error_at)
            .fold(0.0f64, |m, e| m.max(e.abs()));
        // The budget the encoder promised: the channel's rule on the source segment's RMS.
        let Some(Ok(budget)) = cm
            .budget
            .map(|b| b.resolve(finite_rms(&src.values[range.clone()])))
        else {
            findings.push(finding(
                Some(name),
                Some(r.start_ns),
                "the archive records no budget rule the segment's budget resolves from".into(),
            ));
            continue;
        };
        // An event row's budget is the tighter one event capture promised.
        let budget = match (r.event, cm.event_budget_factor) {
            (Some(true), Some(f)) => crate::codec::quant::budget_to_f32(budget * f),
            (Some(true), None) => {
                findings.push(finding(
                    Some(name),
                    Some(r.start_ns),
                    "an event row in a channel whose metadata records no event capture".into(),
                ));
                budget
            }
            _ => budget,
        };
        if r.event == Some(true) {
            check.events += 1;
        }
        check.worst_error_rms = check.worst_error_rms.max(err);
        check.max_abs_error = check.max_abs_error.max(max_abs);
        check_peak(
            cm,
            dec.peaks.get(k).copied().flatten(),
            max_abs,
            r.start_ns,
            findings,
        );
        if let Some(Some(bins)) = dec.protected.get(k) {
            let seg = Segment {
                source: &src.values[range.clone()],
                decoded: &dec.values[range.clone()],
                start_ns: r.start_ns,
            };
            check_protected(cm, bins, seg, fft, findings);
        }
        if budget > 0.0 {
            check.worst_error_over_budget = check.worst_error_over_budget.max(err / budget);
        }
        if !(err <= budget) {
            findings.push(finding(
                Some(name),
                Some(r.start_ns),
                format!("RMS error {err:.6e} exceeds the budget {budget:.6e}"),
            ));
        } else if !(err <= r.error_rms as f64 * (1.0 + RECORDED_ERROR_SLACK) + f64::MIN_POSITIVE)
            || (budget > 0.0
                && !(err / budget <= r.budget_use as f64 * (1.0 + RECORDED_ERROR_SLACK)))
        {
            findings.push(finding(
                Some(name),
                Some(r.start_ns),
                format!(
                    "RMS error {err:.6e} (budget {budget:.6e}) is above what its row records \
                     (error {:.6e}, error/budget {:.6e})",
                    r.error_rms, r.budget_use
                ),
            ));
        }
    }
    check
}

/// The peak guard's promises for one segment: no sample beyond the channel's limit, and none
/// beyond the peak its segment records (which must itself be within the limit).
fn check_peak(
    cm: &ChannelMeta,
    claimed: Option<f32>,
    max_abs: f64,
    start_ns: i64,
    findings: &mut Vec<Finding>,
) {
    let name = Some(cm.name.as_str());
    if let Some(limit) = cm.peak_max {
        if !(max_abs <= limit) {
            findings.push(finding(
                name,
                Some(start_ns),
                format!("largest absolute error {max_abs:.6e} exceeds the peak limit {limit:.6e}"),
            ));
        }
        if let Some(c) = claimed {
            if !(c as f64 <= limit) {
                findings.push(finding(
                    name,
                    Some(start_ns),
                    format!("the segment claims a peak error {c:.6e} above the limit {limit:.6e}"),
                ));
            }
        }
    } else if claimed.is_some() {
        findings.push(finding(
            name,
            Some(start_ns),
            "the segment carries a peak guard the channel's metadata does not record".into(),
        ));
    }
    if let Some(c) = claimed {
        if !(max_abs <= c as f64 * (1.0 + RECORDED_ERROR_SLACK)) {
            findings.push(finding(
                name,
                Some(start_ns),
                format!(
                    "largest absolute error {max_abs:.6e} is above the peak its segment records \
                     ({c:.6e})"
                ),
            ));
        }
    }
}

/// One segment's source and decoded values.
struct Segment<'a> {
    source: &'a [f64],
    decoded: &'a [f64],
    start_ns: i64,
}

/// Protected bins: each decoded amplitude within 1 % of the source's, or the channel's floor
/// ([`crate::codec::bands`]), on spectra with non-finite positions filled alike.
fn check_protected(
    cm: &ChannelMeta,
    bins: &[u32],
    seg: Segment<'_>,
    fft: &dyn Transform,
    findings: &mut Vec<Finding>,
) {
    let name = Some(cm.name.as_str());
    let Some(protection) = &cm.protection else {
        findings.push(finding(
            name,
            Some(seg.start_ns),
            "the segment carries protected bins the channel's metadata does not record".into(),
        ));
        return;
    };
    let n = seg.source.len();
    let spectrum = |v: &[f64]| {
        let mut f = v.to_vec();
        fill_non_finite(&mut f);
        fft.forward(&f)
    };
    let (src, dec) = (spectrum(seg.source), spectrum(seg.decoded));
    let floor_c = protection.floor * (n as f64).sqrt() / 2.0;
    for &k in bins {
        let k = k as usize;
        let (Some(a), Some(b)) = (src.get(k), dec.get(k)) else {
            findings.push(finding(
                name,
                Some(seg.start_ns),
                format!("protected bin {k} is beyond the segment's spectrum"),
            ));
            continue;
        };
        let tol = (AMPLITUDE_TOLERANCE * a.norm()).max(floor_c);
        let off = (b.norm() - a.norm()).abs();
        if !(off <= tol * (1.0 + RECORDED_ERROR_SLACK) + f64::MIN_POSITIVE) {
            findings.push(finding(
                name,
                Some(seg.start_ns),
                format!(
                    "protected bin {k}: amplitude {:.6e} against the source's {:.6e} (allowed \
                     {:.6e})",
                    amplitude(*b, n),
                    amplitude(*a, n),
                    2.0 * tol / (n as f64).sqrt()
                ),
            ));
        }
    }
}

fn same_specials(
    a: &[(usize, SpecialKind)],
    b: &[(usize, SpecialKind)],
    value_type: ValueType,
) -> bool {
    let norm = |k: SpecialKind| match (k, value_type) {
        (SpecialKind::Nan(bits), ValueType::F32) => SpecialKind::Nan(bits & 0xffff_ffff),
        (k, _) => k,
    };
    a.len() == b.len()
        && a.iter()
            .zip(b)
            .all(|(x, y)| x.0 == y.0 && norm(x.1) == norm(y.1))
}
