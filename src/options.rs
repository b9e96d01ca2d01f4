//! Options: the one job specification, filled by command-line flags and by the `[encode]`
//! table of `pipelines/*.toml` through the same serde type, and validated once into the
//! resolved [`Settings`] the stages use.
//!
//! Does not: touch files.

use serde::{Deserialize, Serialize};

use crate::codec::bands::{rotor_bar_sidebands_hz, Band, BandUnit, BearingGeometry, Protection};
pub use crate::codec::params::{
    Budget, CodecParams, DEFAULT_BLOCK_SAMPLES, DEFAULT_BLOCK_SEGMENTS, DEFAULT_BUDGET_REL,
    DEFAULT_ZSTD_LEVEL, MAX_BLOCK_SAMPLES, MAX_BUDGET, MIN_BLOCK_SAMPLES, MIN_POSITIVE_BUDGET,
};
use crate::codec::segment::FundamentalSetting;
use crate::error::{Error, Result};
pub use crate::model::Layout;
pub use crate::source::Mapping;

/// A budget as written by the user (exactly one of `rms` and `rel`).
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct BudgetSpec {
    /// Absolute RMS budget in channel units.
    pub rms: Option<f64>,
    /// Relative budget: fraction of each segment's RMS.
    pub rel: Option<f64>,
    /// Absolute floor under a relative budget (channel units). Default 0.
    pub floor: Option<f64>,
}

impl BudgetSpec {
    /// Validate into a [`Budget`]; `None` when neither `rms` nor `rel` is set.
    pub fn resolve(&self, name: &str) -> Result<Option<Budget>> {
        let check = |what: &str, v: f64| -> Result<f64> {
            if !(v.is_finite() && v >= 0.0) {
                return Err(Error::InvalidOption {
                    name: format!("{name}{what}"),
                    reason: format!("must be a finite number ≥ 0, got {v}"),
                });
            }
            Ok(v)
        };
        // Absolute values are recorded per segment as f32: refuse one that no f32 holds,
        // rather than record another budget than the one written.
        let storable = |what: &str, v: f64| -> Result<f64> {
            let v = check(what, v)?;
            if v != 0.0 && !(MIN_POSITIVE_BUDGET..=MAX_BUDGET).contains(&v) {
                return Err(Error::InvalidOption {
                    name: format!("{name}{what}"),
                    reason: format!(
                        "{v:e} cannot be recorded: archives store budgets as 32-bit floats, \
                         0 or {MIN_POSITIVE_BUDGET:e} … {MAX_BUDGET:e} (0 means lossless)"
                    ),
                });
            }
            Ok(v)
        };
        match (self.rms, self.rel) {
            (Some(_), Some(_)) => Err(Error::InvalidOption {
                name: name.to_string(),
                reason: "give either an absolute (rms) or a relative (rel) budget, not both".into(),
            }),
            (Some(r), None) => {
                if self.floor.is_some() {
                    return Err(Error::InvalidOption {
                        name: format!("{name}floor"),
                        reason: "a floor applies to relative budgets only".into(),
                    });
                }
                Ok(Some(Budget::Absolute(storable("rms", r)?)))
            }
            (None, Some(f)) => Ok(Some(Budget::Relative {
                fraction: check("rel", f)?,
                floor: storable("floor", self.floor.unwrap_or(0.0))?,
            })),
            (None, None) => {
                if self.floor.is_some() {
                    return Err(Error::InvalidOption {
                        name: format!("{name}floor"),
                        reason: "a floor needs a relative budget".into(),
                    });
                }
                Ok(None)
            }
        }
    }
}

/// A per-channel budget: channels whose name matches the glob pattern get this budget.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct BudgetRule {
    /// Glob pattern over channel names (`*`, `?`, `[…]`).
    pub channels: String,
    /// Absolute RMS budget.
    pub rms: Option<f64>,
    /// Relative budget.
    pub rel: Option<f64>,
    /// Floor under a relative budget.
    pub floor: Option<f64>,
}

/// A per-channel peak limit: channels whose name matches the glob pattern get this limit
/// instead of the default `peak_max`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PeakRule {
    /// Glob pattern over channel names (`*`, `?`, `[…]`).
    pub channels: String,
    /// Largest absolute error of any decoded sample (channel units).
    pub max: f64,
}

/// Bearing geometry for protected bands: its defect frequencies (FTF, BPFO, BPFI, BSF) as
/// orders of the shaft, each ± `slip` of itself.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct BearingSpec {
    /// Rolling elements.
    pub elements: u32,
    /// Ball (roller) diameter.
    pub ball_diameter: f64,
    /// Pitch diameter (same unit).
    pub pitch_diameter: f64,
    /// Contact angle in degrees. Default 0.
    #[serde(default)]
    pub contact_angle_deg: f64,
    /// Half-width as a fraction of each defect order. Default 0.02 (bearings slip 1–2 %).
    pub slip: Option<f64>,
}

/// Rotor-bar sidebands for protected bands: (1 ± 2ks)·line for k = 1 … `pairs`.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RotorBarSpec {
    /// Line frequency (Hz).
    pub line_hz: f64,
    /// Slip (fraction).
    pub slip: f64,
    /// Sideband pairs. Default 1.
    pub pairs: Option<u32>,
    /// Half-width of each band (Hz). Default 0.5.
    pub half_width_hz: Option<f64>,
}

/// Protected bands, written by the user: lists of `CENTRE` or `CENTRE:HALF_WIDTH`, in Hz or in
/// orders of the tracked fundamental, plus bands computed from a bearing or a motor.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct ProtectSpec {
    /// Channels the rule applies to (glob; rules only). Default `*`.
    pub channels: Option<String>,
    /// Bands in Hz, e.g. `"47:0.5, 53:0.5"`.
    pub hz: Option<String>,
    /// Bands in orders, e.g. `"2.5779:0.05"`.
    pub orders: Option<String>,
    /// Amplitude floor (channel units): a protected bin's amplitude may always be off by
    /// this much. Default 0 (1 % of its amplitude only).
    pub floor: Option<f64>,
    /// Bearing defect orders.
    pub bearing: Option<BearingSpec>,
    /// Rotor-bar sidebands.
    pub rotor_bars: Option<RotorBarSpec>,
}

impl ProtectSpec {
    fn is_empty(&self) -> bool {
        self.hz.is_none()
            && self.orders.is_none()
            && self.bearing.is_none()
            && self.rotor_bars.is_none()
    }

    /// Validate into [`Protection`]; `name` prefixes option names in errors.
    fn resolve(&self, name: &str) -> Result<Protection> {
        let bad = |what: &str, reason: String| Error::InvalidOption {
            name: format!("{name}{what}"),
            reason,
        };
        let mut bands = Vec::new();
        for (what, list, unit) in [
            ("hz", &self.hz, BandUnit::Hz),
            ("orders", &self.orders, BandUnit::Order),
        ] {
            let Some(list) = list else { continue };
            for item in list.split(',').map(str::trim).filter(|s| !s.is_empty()) {
                let (c, w) = item.split_once(':').unwrap_or((item, "0"));
                let (c, w): (f64, f64) = match (c.trim().parse(), w.trim().parse()) {
                    (Ok(c), Ok(w)) => (c, w),
                    _ => {
                        return Err(bad(
                            what,
                            format!("`{item}` is not CENTRE or CENTRE:HALF_WIDTH"),
                        ))
                    }
                };
                if !(c.is_finite() && c > 0.0 && w.is_finite() && w >= 0.0) {
                    return Err(bad(
                        what,
                        format!("`{item}`: the centre must be > 0 and the half-width ≥ 0"),
                    ));
                }
                bands.push(Band {
                    unit,
                    center: c,
                    half_width: w,
                });
            }
        }
        if let Some(b) = self.bearing {
            let g = BearingGeometry {
                elements: b.elements,
                ball_diameter: b.ball_diameter,
                pitch_diameter: b.pitch_diameter,
                contact_angle_deg: b.contact_angle_deg,
            };
            let o = g.defect_orders().ok_or_else(|| {
                bad(
                    "bearing",
                    "needs elements ≥ 1, 0 < ball diameter < pitch diameter and a contact \
                     angle under 90°"
                        .into(),
                )
            })?;
            let slip = b.slip.unwrap_or(DEFAULT_BEARING_SLIP);
            if !(slip.is_finite() && (0.0..1.0).contains(&slip)) {
                return Err(bad(
                    "bearing.slip",
                    format!("must be in [0, 1), got {slip}"),
                ));
            }
            for center in [o.ftf, o.bpfo, o.bpfi, o.bsf] {
                bands.push(Band {
                    unit: BandUnit::Order,
                    center,
                    half_width: slip * center,
                });
            }
        }
        if let Some(r) = self.rotor_bars {
            let w = r.half_width_hz.unwrap_or(DEFAULT_SIDEBAND_HALF_WIDTH_HZ);
            let line_ok = r.line_hz.is_finite() && r.line_hz > 0.0;
            let slip_ok = r.slip.is_finite() && (0.0..1.0).contains(&r.slip);
            if !(line_ok && slip_ok && w.is_finite() && w >= 0.0) {
                return Err(bad(
                    "rotor_bars",
                    "needs line_hz > 0, 0 ≤ slip < 1 and half_width_hz ≥ 0".into(),
                ));
            }
            for f in rotor_bar_sidebands_hz(r.line_hz, r.slip, r.pairs.unwrap_or(1)) {
                bands.push(Band {
                    unit: BandUnit::Hz,
                    center: f,
                    half_width: w,
                });
            }
        }
        let floor = self.floor.unwrap_or(0.0);
        if !(floor.is_finite() && floor >= 0.0) {
            return Err(bad("floor", format!("must be ≥ 0, got {floor}")));
        }
        Ok(Protection { bands, floor })
    }
}

/// A rule's channel pattern must be a valid glob; `name` is the option.
fn check_pattern(name: &str, pattern: &str) -> Result<()> {
    glob::Pattern::new(pattern)
        .map(|_| ())
        .map_err(|e| Error::InvalidOption {
            name: name.into(),
            reason: format!("`{pattern}`: {e}"),
        })
}

/// Default half-width of a bearing's defect-order bands, as a fraction of the order.
pub const DEFAULT_BEARING_SLIP: f64 = 0.02;

/// Default half-width of rotor-bar sideband bands (Hz).
pub const DEFAULT_SIDEBAND_HALF_WIDTH_HZ: f64 = 0.5;

/// A budget chosen by a rule rather than given as a number.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, clap::ValueEnum)]
#[serde(rename_all = "lowercase")]
pub enum BudgetChoice {
    /// Each channel's recommendation from [`crate::jobs::survey`], measured on the source
    /// before it is encoded and recorded in the archive as that channel's budget rule.
    Survey,
}

/// The job specification (flags and pipeline files fill this same type).
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct EncodeOptions {
    /// Absolute RMS budget (channel units). Default: none (relative 0.5 %).
    pub budget_rms: Option<f64>,
    /// Relative budget (fraction of segment RMS). Default 0.005 when no budget is given.
    pub budget_rel: Option<f64>,
    /// Floor under a relative budget. Default 0.
    pub budget_floor: Option<f64>,
    /// `survey`: every channel that no rule in `budgets` matches gets the survey's
    /// recommended budget for it, as an absolute budget. Default: none (the budget above).
    pub budget: Option<BudgetChoice>,
    /// Per-channel budgets; the first matching rule wins over the default budget.
    pub budgets: Vec<BudgetRule>,
    /// Peak guard: largest absolute error of any decoded sample (channel units). Default:
    /// none (only the RMS budget holds).
    pub peak_max: Option<f64>,
    /// Per-channel peak limits; the first matching rule wins over `peak_max`.
    pub peaks: Vec<PeakRule>,
    /// Protected bands of every channel. Default: none.
    pub protect: Option<ProtectSpec>,
    /// Per-channel protected bands; the first matching rule wins over `protect`.
    pub protects: Vec<ProtectSpec>,
    /// Event capture: segments whose crest factor, kurtosis or RMS jumps are marked and
    /// coded at a tenth of the budget. Default false.
    pub events: Option<bool>,
    /// "auto" (default), "none", or a frequency in Hz.
    pub fundamental: Option<String>,
    /// Whole cycles per segment. Default: fewest spanning 200 ms.
    pub cycles_per_segment: Option<u32>,
    /// Source layout. Default: detected.
    pub layout: Option<Layout>,
    /// Time column. Default `time`.
    pub time_column: Option<String>,
    /// Channel column (long layout). Default `channel`.
    pub channel_column: Option<String>,
    /// Value column (long layout). Default `value`.
    pub value_column: Option<String>,
    /// Only these channels. Default: all.
    pub channels: Option<Vec<String>>,
    /// Sample rate in Hz. Default: from the timestamps (median step).
    pub sample_rate_hz: Option<f64>,
    /// zstd level of blocks (1–22). Default 19.
    pub zstd_level: Option<i32>,
    /// Most segments per block. Default 256.
    pub block_segments: Option<usize>,
    /// Most samples per block. Default 2¹⁹ (524,288). A block is what a reader decodes to
    /// reach any time in it, and what the encoder holds of each channel while it fills:
    /// larger blocks code smaller (fewer block headers, fewer restarts of the prediction)
    /// and cost memory per channel (about 32 bytes a sample).
    pub block_samples: Option<usize>,
}

/// Validated settings: what the source reader needs and what the codec needs, split once.
#[derive(Debug, Clone, PartialEq)]
pub struct Settings {
    /// Column mapping and sample rate, for the source reader.
    pub source: Mapping,
    /// Budgets, segmentation and levels, for the codec.
    pub codec: CodecParams,
    /// The default budget is each channel's survey recommendation: resolved by the encode
    /// job into one absolute rule per channel (after the user's rules) before it encodes.
    pub budget_from_survey: bool,
}

/// The settings as recorded in archives and manifests: one flat record, in a fixed field
/// order, so that the recorded bytes do not depend on how the settings are grouped in code.
#[derive(Serialize)]
struct SettingsRecord<'a> {
    budget: &'a Budget,
    budget_rules: &'a [(String, Budget)],
    fundamental: &'a FundamentalSetting,
    cycles_per_segment: Option<u32>,
    layout: Option<Layout>,
    time_column: &'a str,
    channel_column: &'a str,
    value_column: &'a str,
    channels: &'a Option<Vec<String>>,
    sample_rate_hz: Option<f64>,
    zstd_level: i32,
    block_segments: usize,
    block_samples: usize,
    // Absent when unset, so that an archive written without a guard records the settings
    // as builds before the guard did.
    #[serde(skip_serializing_if = "Option::is_none")]
    peak_max: Option<f64>,
    #[serde(skip_serializing_if = "<[_]>::is_empty")]
    peak_rules: &'a [(String, f64)],
    #[serde(skip_serializing_if = "Option::is_none")]
    protection: &'a Option<Protection>,
    #[serde(skip_serializing_if = "<[_]>::is_empty")]
    protection_rules: &'a [(String, Protection)],
    #[serde(skip_serializing_if = "std::ops::Not::not")]
    events: bool,
    #[serde(skip_serializing_if = "std::ops::Not::not")]
    budget_from_survey: bool,
    #[serde(skip_serializing_if = "Option::is_none")]
    window_ns: Option<(i64, i64)>,
}

impl Serialize for Settings {
    fn serialize<S: serde::Serializer>(&self, s: S) -> std::result::Result<S::Ok, S::Error> {
        let (m, c) = (&self.source, &self.codec);
        SettingsRecord {
            budget: &c.budget,
            budget_rules: &c.budget_rules,
            fundamental: &c.fundamental,
            cycles_per_segment: c.cycles_per_segment,
            layout: m.layout,
            time_column: &m.time_column,
            channel_column: &m.channel_column,
            value_column: &m.value_column,
            channels: &m.channels,
            sample_rate_hz: m.sample_rate_hz,
            zstd_level: c.zstd_level,
            block_segments: c.block_segments,
            block_samples: c.block_samples,
            peak_max: c.peak_max,
            peak_rules: &c.peak_rules,
            protection: &c.protection,
            protection_rules: &c.protection_rules,
            events: c.events,
            budget_from_survey: self.budget_from_survey,
            window_ns: m.window,
        }
        .serialize(s)
    }
}

impl EncodeOptions {
    /// Merge: values set in `over` replace those in `self`.
    pub fn overlay(&self, over: &EncodeOptions) -> EncodeOptions {
        macro_rules! pick {
            ($($f:ident),*) => { EncodeOptions { $($f: over.$f.clone().or_else(|| self.$f.clone()),)*
                budgets: if over.budgets.is_empty() { self.budgets.clone() } else { over.budgets.clone() },
                peaks: if over.peaks.is_empty() { self.peaks.clone() } else { over.peaks.clone() },
                protects: if over.protects.is_empty() { self.protects.clone() } else { over.protects.clone() } } };
        }
        let mut o = pick!(
            budget_rms,
            budget_rel,
            budget_floor,
            budget,
            peak_max,
            protect,
            events,
            fundamental,
            cycles_per_segment,
            layout,
            time_column,
            channel_column,
            value_column,
            channels,
            sample_rate_hz,
            zstd_level,
            block_segments,
            block_samples
        );
        // An absolute budget given on top replaces a relative one, and vice versa; a number
        // replaces a chosen budget, and a chosen budget replaces numbers.
        if over.budget_rms.is_some() {
            o.budget_rel = None;
            o.budget_floor = None;
        } else if over.budget_rel.is_some() {
            o.budget_rms = None;
        }
        if over.budget_rms.is_some() || over.budget_rel.is_some() {
            o.budget = None;
        } else if over.budget.is_some() {
            o.budget_rms = None;
            o.budget_rel = None;
            o.budget_floor = None;
        }
        o
    }

    /// Validate into [`Settings`].
    pub fn resolve(&self) -> Result<Settings> {
        let spec = BudgetSpec {
            rms: self.budget_rms,
            rel: self.budget_rel,
            floor: self.budget_floor,
        };
        if self.budget.is_some() && (self.budget_rms.is_some() || self.budget_rel.is_some()) {
            return Err(Error::InvalidOption {
                name: "budget".into(),
                reason: "give either `survey` or a number (rms or rel), not both".into(),
            });
        }
        let budget = spec.resolve("budget-")?.unwrap_or(Budget::Relative {
            fraction: DEFAULT_BUDGET_REL,
            floor: 0.0,
        });
        let mut budget_rules = Vec::new();
        for r in &self.budgets {
            check_pattern("budgets.channels", &r.channels)?;
            let b = BudgetSpec {
                rms: r.rms,
                rel: r.rel,
                floor: r.floor,
            }
            .resolve("budgets.")?
            .ok_or_else(|| Error::InvalidOption {
                name: "budgets".into(),
                reason: format!("rule for `{}` sets neither rms nor rel", r.channels),
            })?;
            budget_rules.push((r.channels.clone(), b));
        }
        // A peak limit is recorded per segment as f32 and must be a usable number.
        let peak = |name: &str, v: f64| -> Result<f64> {
            if !(v.is_finite() && v > 0.0 && v <= MAX_BUDGET) {
                return Err(Error::InvalidOption {
                    name: name.to_string(),
                    reason: format!("must be a finite number > 0 (channel units), got {v}"),
                });
            }
            Ok(v)
        };
        let peak_max = self.peak_max.map(|v| peak("peak-max", v)).transpose()?;
        let mut peak_rules = Vec::new();
        for r in &self.peaks {
            check_pattern("peaks.channels", &r.channels)?;
            peak_rules.push((r.channels.clone(), peak("peaks.max", r.max)?));
        }
        let protection = match &self.protect {
            Some(p) if !p.is_empty() => Some(p.resolve("protect-")?),
            _ => None,
        };
        let mut protection_rules = Vec::new();
        for r in &self.protects {
            let pattern = r.channels.clone().unwrap_or_else(|| "*".into());
            check_pattern("protects.channels", &pattern)?;
            protection_rules.push((pattern, r.resolve("protects.")?));
        }
        let fundamental = match self.fundamental.as_deref().map(str::trim) {
            None | Some("auto") => FundamentalSetting::Auto,
            Some("none") => FundamentalSetting::None,
            Some(s) => {
                let hz: f64 = s.parse().map_err(|_| Error::InvalidOption {
                    name: "fundamental".into(),
                    reason: format!("`{s}` is not `auto`, `none` or a frequency in Hz"),
                })?;
                if !(hz.is_finite() && hz > 0.0) {
                    return Err(Error::InvalidOption {
                        name: "fundamental".into(),
                        reason: format!("frequency must be > 0 Hz, got {hz}"),
                    });
                }
                FundamentalSetting::Hz(hz)
            }
        };
        if self.cycles_per_segment == Some(0) {
            return Err(Error::InvalidOption {
                name: "cycles-per-segment".into(),
                reason: "must be at least 1".into(),
            });
        }
        if let Some(fs) = self.sample_rate_hz {
            if !(fs.is_finite() && fs > 0.0) {
                return Err(Error::InvalidOption {
                    name: "sample-rate-hz".into(),
                    reason: format!("must be > 0, got {fs}"),
                });
            }
        }
        let zstd_level = self.zstd_level.unwrap_or(DEFAULT_ZSTD_LEVEL);
        if !(1..=22).contains(&zstd_level) {
            return Err(Error::InvalidOption {
                name: "zstd-level".into(),
                reason: format!("must be 1 … 22, got {zstd_level}"),
            });
        }
        let block_segments = self.block_segments.unwrap_or(DEFAULT_BLOCK_SEGMENTS);
        if block_segments == 0 {
            return Err(Error::InvalidOption {
                name: "block-segments".into(),
                reason: "must be at least 1".into(),
            });
        }
        let block_samples = self.block_samples.unwrap_or(DEFAULT_BLOCK_SAMPLES);
        if !(MIN_BLOCK_SAMPLES..=MAX_BLOCK_SAMPLES).contains(&block_samples) {
            return Err(Error::InvalidOption {
                name: "block-samples".into(),
                reason: format!(
                    "must be {MIN_BLOCK_SAMPLES} … {MAX_BLOCK_SAMPLES}, got {block_samples}"
                ),
            });
        }
        Ok(Settings {
            source: Mapping {
                layout: self.layout,
                time_column: self.time_column.clone().unwrap_or_else(|| "time".into()),
                channel_column: self
                    .channel_column
                    .clone()
                    .unwrap_or_else(|| "channel".into()),
                value_column: self.value_column.clone().unwrap_or_else(|| "value".into()),
                channels: self.channels.clone(),
                sample_rate_hz: self.sample_rate_hz,
                window: None,
            },
            codec: CodecParams {
                budget,
                budget_rules,
                fundamental,
                cycles_per_segment: self.cycles_per_segment,
                zstd_level,
                block_segments,
                block_samples,
                peak_max,
                peak_rules,
                protection,
                protection_rules,
                events: self.events.unwrap_or(false),
            },
            budget_from_survey: self.budget == Some(BudgetChoice::Survey),
        })
    }
}

impl Settings {
    /// The settings that change the archive's bytes, as a stable string (for the manifest
    /// and the archive metadata).
    pub fn fingerprint(&self) -> String {
        serde_json::to_string(self).unwrap_or_default()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn negative_and_nan_budgets_are_refused() {
        for v in [-1.0, f64::NAN, f64::INFINITY] {
            let o = EncodeOptions {
                budget_rms: Some(v),
                ..Default::default()
            };
            assert!(o.resolve().is_err(), "{v}");
        }
    }

    #[test]
    fn both_budget_kinds_at_once_are_refused() {
        let o = EncodeOptions {
            budget_rms: Some(1.0),
            budget_rel: Some(0.01),
            ..Default::default()
        };
        assert!(o.resolve().is_err());
    }

    #[test]
    fn first_matching_rule_wins() {
        let o = EncodeOptions {
            budget_rms: Some(1.0),
            budgets: vec![BudgetRule {
                channels: "p201.*".into(),
                rms: Some(0.5),
                rel: None,
                floor: None,
            }],
            ..Default::default()
        };
        let s = o.resolve().unwrap();
        assert_eq!(s.codec.budget_for("p201.de"), Budget::Absolute(0.5));
        assert_eq!(s.codec.budget_for("p202.de"), Budget::Absolute(1.0));
    }
}
