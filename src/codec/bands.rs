//! Protected bands: frequency bands whose DFT bins are kept with their amplitude whatever the
//! budget, and the helpers that compute the bands diagnosis uses — bearing defect frequencies
//! from the geometry, and the rotor-bar sidebands of motor current.
//!
//! A band is a centre and a half-width, either in Hz or in orders (multiples of the
//! segment's fundamental). On a segment of N samples at rate fs, bin k sits at k·fs/N Hz; a
//! band protects every bin 1 … N/2 inside it, or the nearest one when it is narrower than a
//! bin. Orders need the segment's fundamental (K cycles over the ideal length Λ: order o is
//! at bin o·K·N/Λ); on a segment without one, order bands protect nothing.
//!
//! Amplitudes: a bin's peak amplitude in channel units is `2|X_k|/N` (`2|c_k|/√N` for the
//! orthonormal coefficient). A protected bin comes back within [`AMPLITUDE_TOLERANCE`] of its
//! source amplitude, or within the channel's absolute floor, whichever is larger.
//!
//! How a segment keeps them ([`Protected`]): the residual of each protected bin — the source's
//! orthonormal coefficient less that of the segment's output — quantized with a step of its
//! own, fine enough for the tolerance, and added back to the decoder's output as a sinusoid
//! before rounding. The encoder checks the amplitudes of what the decoder will output and
//! halves the step until they hold (lossless where they cannot).
//!
//! Does not: choose a basis (that is `fit`) or produce bytes (that is `frame`).

use serde::{Deserialize, Serialize};

/// Relative amplitude tolerance of a protected bin (1 %).
pub const AMPLITUDE_TOLERANCE: f64 = 0.01;

/// What a band's centre and half-width are measured in.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum BandUnit {
    /// Hertz.
    Hz,
    /// Multiples of the segment's fundamental.
    Order,
}

/// One protected band.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Band {
    /// Unit of `center` and `half_width`.
    pub unit: BandUnit,
    /// Centre.
    pub center: f64,
    /// Half-width (≥ 0).
    pub half_width: f64,
}

/// The protection of a channel: its bands and the absolute amplitude floor (channel units).
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
pub struct Protection {
    /// The bands.
    pub bands: Vec<Band>,
    /// Amplitude floor: a protected bin's amplitude error may always be this large.
    pub floor: f64,
}

/// Where a segment's bins are: its length, the sample rate and, for periodic segments, its
/// cycles and ideal length.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SegmentFrame {
    /// Samples N.
    pub len: usize,
    /// Sample rate (Hz).
    pub sample_rate: f64,
    /// Whole cycles K (0 when not periodic).
    pub cycles: u32,
    /// Ideal length Λ (samples).
    pub ideal_len: f64,
}

impl Protection {
    /// The protected bins of a segment, increasing, without repeats (1 … N/2).
    pub fn bins(&self, seg: SegmentFrame) -> Vec<u32> {
        let n = seg.len;
        let top = n / 2;
        if top == 0 || !(seg.sample_rate > 0.0) {
            return Vec::new();
        }
        // Bins per unit of the band's measure.
        let hz_per_bin = seg.sample_rate / n as f64;
        let per_order = (seg.cycles > 0 && seg.ideal_len > 0.0)
            .then(|| seg.cycles as f64 * n as f64 / seg.ideal_len);
        let mut out = Vec::new();
        for b in &self.bands {
            let scale = match b.unit {
                BandUnit::Hz => 1.0 / hz_per_bin,
                BandUnit::Order => match per_order {
                    Some(s) => s,
                    None => continue,
                },
            };
            let (c, w) = (b.center * scale, b.half_width * scale);
            let lo = (c - w).ceil().max(1.0);
            let hi = (c + w).floor().min(top as f64);
            if lo <= hi {
                out.extend((lo as u32)..=(hi as u32));
            } else {
                let k = c.round();
                if k >= 1.0 && k <= top as f64 {
                    out.push(k as u32);
                }
            }
        }
        out.sort_unstable();
        out.dedup();
        out
    }
}

/// Bearing geometry: rolling elements, ball and pitch diameters (same unit), contact angle.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct BearingGeometry {
    /// Rolling elements N.
    pub elements: u32,
    /// Ball (roller) diameter d.
    pub ball_diameter: f64,
    /// Pitch diameter D.
    pub pitch_diameter: f64,
    /// Contact angle α in degrees (0 for a deep-groove ball bearing under radial load).
    #[serde(default)]
    pub contact_angle_deg: f64,
}

/// A bearing's defect frequencies as orders of the shaft rate (multiply by the shaft rate
/// for Hz).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct DefectOrders {
    /// Fundamental train (cage) frequency.
    pub ftf: f64,
    /// Ball pass frequency, outer race.
    pub bpfo: f64,
    /// Ball pass frequency, inner race.
    pub bpfi: f64,
    /// Ball (roller) spin frequency.
    pub bsf: f64,
}

impl BearingGeometry {
    /// The kinematic defect frequencies over the shaft rate, with k = (d/D)·cos α:
    /// FTF = ½(1 − k), BPFO = ½N(1 − k), BPFI = ½N(1 + k), BSF = (D/2d)(1 − k²) (standard
    /// bearing kinematics, e.g. Randall, Vibration-based Condition Monitoring, 2011).
    /// `None` for a geometry no bearing has.
    pub fn defect_orders(&self) -> Option<DefectOrders> {
        let (d, pd) = (self.ball_diameter, self.pitch_diameter);
        if self.elements == 0 || !(d > 0.0 && pd > d) || !(self.contact_angle_deg.abs() < 90.0) {
            return None;
        }
        let k = d / pd * self.contact_angle_deg.to_radians().cos();
        let n = self.elements as f64;
        Some(DefectOrders {
            ftf: 0.5 * (1.0 - k),
            bpfo: 0.5 * n * (1.0 - k),
            bpfi: 0.5 * n * (1.0 + k),
            bsf: pd / (2.0 * d) * (1.0 - k * k),
        })
    }
}

/// Broken-rotor-bar sidebands of a motor current: (1 ± 2ks)·f for k = 1 … `pairs`, lower
/// then upper for each k (current signature analysis). Sidebands at or below 0 Hz are left out.
pub fn rotor_bar_sidebands_hz(line_hz: f64, slip: f64, pairs: u32) -> Vec<f64> {
    let mut out = Vec::new();
    for k in 1..=pairs {
        let d = 2.0 * k as f64 * slip;
        for f in [(1.0 - d) * line_hz, (1.0 + d) * line_hz] {
            if f > 0.0 {
                out.push(f);
            }
        }
    }
    out
}

/// A segment's protected bins as stored: refinements of the output's coefficients.
#[derive(Debug, Clone, PartialEq)]
pub struct Protected {
    /// Refinement step (orthonormal-coefficient units), exactly as stored.
    pub step: f32,
    /// The protected bins, increasing (1 … N/2).
    pub bins: Vec<u32>,
    /// Two codes per bin: real part, imaginary part (0 for the Nyquist bin).
    pub codes: Vec<i64>,
}

/// Bins between re-anchorings of the rotating phasor in [`add_refinement`].
const REANCHOR: usize = 256;

/// Add a segment's refinements to its unrounded output: bin k with refinement
/// `r = step·(q_re + i·q_im)` adds `(w/√N)·Re(r·e^(2πi·k·m/N))` to sample m (w = 2 off the
/// Nyquist bin; the orthonormal inverse DFT of a real signal). The phasor rotates by
/// multiplication and is re-anchored from the exact angle every 256 samples.
pub fn add_refinement(y: &mut [f64], p: &Protected) {
    let n = y.len();
    if n == 0 {
        return;
    }
    let scale = 1.0 / (n as f64).sqrt();
    let tau = std::f64::consts::TAU;
    for (j, &k) in p.bins.iter().enumerate() {
        let (qr, qi) = (
            p.codes.get(2 * j).copied().unwrap_or(0),
            p.codes.get(2 * j + 1).copied().unwrap_or(0),
        );
        if qr == 0 && qi == 0 {
            continue;
        }
        let k = k as usize;
        let w = if crate::signal::is_real_bin(k, n) {
            1.0
        } else {
            2.0
        };
        let r = crate::signal::C64::new(qr as f64, qi as f64) * (p.step as f64 * w * scale);
        let turn = crate::signal::C64::from_polar(1.0, tau * k as f64 / n as f64);
        let mut z = crate::signal::C64::new(1.0, 0.0);
        for (m, v) in y.iter_mut().enumerate() {
            if m % REANCHOR == 0 {
                let at = (k * m % n) as f64 / n as f64;
                z = crate::signal::C64::from_polar(1.0, tau * at);
            }
            *v += r.re * z.re - r.im * z.im;
            z *= turn;
        }
    }
}

/// Peak amplitude (channel units) of orthonormal bin `c` on a segment of `n` samples.
#[inline]
pub fn amplitude(c: crate::signal::C64, n: usize) -> f64 {
    2.0 * c.norm() / (n as f64).sqrt()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bands_take_the_bins_inside_or_the_nearest_one() {
        let p = Protection {
            bands: vec![
                Band {
                    unit: BandUnit::Hz,
                    center: 50.0,
                    half_width: 10.0,
                },
                Band {
                    unit: BandUnit::Hz,
                    center: 101.0,
                    half_width: 0.5,
                },
                Band {
                    unit: BandUnit::Order,
                    center: 3.0,
                    half_width: 0.0,
                },
            ],
            floor: 0.0,
        };
        // 5 Hz bins (200 ms at 10 kHz), 10 cycles of 50 Hz.
        let seg = SegmentFrame {
            len: 2000,
            sample_rate: 10_000.0,
            cycles: 10,
            ideal_len: 2000.0,
        };
        assert_eq!(p.bins(seg), vec![8, 9, 10, 11, 12, 20, 30]);
        let aperiodic = SegmentFrame { cycles: 0, ..seg };
        assert_eq!(p.bins(aperiodic), vec![8, 9, 10, 11, 12, 20]);
    }
}
