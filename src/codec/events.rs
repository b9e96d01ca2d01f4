//! Event capture: segments whose crest factor, kurtosis or RMS jumps against the segments
//! before them (an impact train starting, a start-up, a trip) are marked and coded at a
//! tighter budget, so what a failure investigation looks at first comes back closer.
//!
//! The rule, per run of a channel, causal so that it gives the same marks however the
//! samples arrive: a segment's statistics over its finite values, mean removed — RMS, crest
//! factor (largest |x − mean| over RMS) and kurtosis (m₄/m₂², 3 for Gaussian noise; crest
//! factor and kurtosis as impact indicators: Randall, Vibration-based Condition Monitoring,
//! 2011, ch. 5) — against the median of the same statistic over the previous
//! [`EVENT_HISTORY`] segments (at least [`EVENT_MIN_HISTORY`] of them). A segment is an event
//! when
//! - its crest factor is above [`EVENT_CREST_RATIO`] × that median and at least
//!   [`EVENT_MIN_CREST`], or
//! - its kurtosis is above [`EVENT_KURTOSIS_RATIO`] × that median and at least
//!   [`EVENT_MIN_KURTOSIS`], or
//! - its RMS is above [`EVENT_RMS_RATIO`] × that median or below it divided by the ratio.
//!
//! An event segment's budget is the channel's budget × [`EVENT_BUDGET_FACTOR`].
//!
//! Does not: code anything.

use std::collections::VecDeque;

/// Segments of history the rule compares with.
pub const EVENT_HISTORY: usize = 8;
/// Fewest segments of history before a segment can be an event.
pub const EVENT_MIN_HISTORY: usize = 3;
/// Crest factor jump.
pub const EVENT_CREST_RATIO: f64 = 1.5;
/// Least crest factor of an event: above a sine's √2 and a square wave's 1, so a small
/// wobble of a clean periodic signal is not an event (on noise-like vibration the ratio
/// decides: Gaussian noise's crest factor over a few thousand samples is about 3.5–4.2).
pub const EVENT_MIN_CREST: f64 = 3.0;
/// Kurtosis jump.
pub const EVENT_KURTOSIS_RATIO: f64 = 2.0;
/// Least kurtosis of an event: above Gaussian noise's 3 (a sine's is 1.5).
pub const EVENT_MIN_KURTOSIS: f64 = 4.0;
/// RMS jump, up or down.
pub const EVENT_RMS_RATIO: f64 = 3.0;
/// An event segment's budget over the channel's.
pub const EVENT_BUDGET_FACTOR: f64 = 0.1;

/// What the rule measures on a segment.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SegmentStats {
    /// RMS about the mean.
    pub rms: f64,
    /// Largest |x − mean| over the RMS.
    pub crest: f64,
    /// m₄ / m₂².
    pub kurtosis: f64,
}

/// The statistics of a segment's finite values; `None` with fewer than 8 or a constant one.
pub fn segment_stats(x: &[f64]) -> Option<SegmentStats> {
    let finite = || x.iter().copied().filter(|v| v.is_finite());
    let n = finite().count();
    if n < 8 {
        return None;
    }
    let mean = finite().sum::<f64>() / n as f64;
    let (mut m2, mut m4, mut peak) = (0.0, 0.0, 0.0f64);
    for v in finite() {
        let d = v - mean;
        let d2 = d * d;
        m2 += d2;
        m4 += d2 * d2;
        peak = peak.max(d.abs());
    }
    let (m2, m4) = (m2 / n as f64, m4 / n as f64);
    if !(m2 > 0.0 && m2.is_finite() && m4.is_finite()) {
        return None;
    }
    let rms = m2.sqrt();
    Some(SegmentStats {
        rms,
        crest: peak / rms,
        kurtosis: m4 / (m2 * m2),
    })
}

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    let n = v.len();
    if n % 2 == 1 {
        v[n / 2]
    } else {
        0.5 * (v[n / 2 - 1] + v[n / 2])
    }
}

/// The rule's memory over one run.
#[derive(Debug, Clone, Default)]
pub struct EventDetector {
    history: VecDeque<SegmentStats>,
}

impl EventDetector {
    /// Whether the next segment of the run (its values `x`) is an event; remembers it.
    pub fn mark(&mut self, x: &[f64]) -> bool {
        let Some(s) = segment_stats(x) else {
            return false;
        };
        let event = self.history.len() >= EVENT_MIN_HISTORY && {
            let med = |f: fn(&SegmentStats) -> f64| median(self.history.iter().map(f).collect());
            let (rms, crest, kurt) = (med(|h| h.rms), med(|h| h.crest), med(|h| h.kurtosis));
            (s.crest > EVENT_CREST_RATIO * crest && s.crest >= EVENT_MIN_CREST)
                || (s.kurtosis > EVENT_KURTOSIS_RATIO * kurt && s.kurtosis >= EVENT_MIN_KURTOSIS)
                || s.rms > EVENT_RMS_RATIO * rms
                || s.rms * EVENT_RMS_RATIO < rms
        };
        if self.history.len() == EVENT_HISTORY {
            self.history.pop_front();
        }
        self.history.push_back(s);
        event
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_sine_has_the_crest_factor_and_kurtosis_of_the_textbook() {
        // A sine: crest factor √2, kurtosis 3/2 (m₄ = 3A⁴/8, m₂ = A²/2).
        let x: Vec<f64> = (0..4000)
            .map(|i| (std::f64::consts::TAU * i as f64 / 40.0).sin())
            .collect();
        let s = segment_stats(&x).unwrap();
        assert!((s.crest - 2f64.sqrt()).abs() < 1e-3, "{}", s.crest);
        assert!((s.kurtosis - 1.5).abs() < 1e-6, "{}", s.kurtosis);
    }
}
