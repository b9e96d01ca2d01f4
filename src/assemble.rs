//! Assemble: gather each channel's samples from the source's batches, sort them by time when
//! the source is not time-ordered, refuse duplicate (channel, time) rows, find the sample rate
//! (median step, or the user's value) and split each channel into runs at holes (a step beyond
//! 1.5× the median).
//!
//! Does not: anything Fourier (that is `segment` and `fit`).

use std::path::Path;

use crate::error::{Error, Result};
use crate::pack::SpecialKind;
use crate::read::{ChannelChunk, ChannelInfo};

/// A step beyond this multiple of the median step starts a new run.
pub const HOLE_FACTOR: f64 = 1.5;

/// One channel's samples as gathered from the source.
#[derive(Debug, Default, Clone)]
pub struct ChannelSamples {
    /// Times (ns).
    pub times: Vec<i64>,
    /// Values (NaN at specials).
    pub values: Vec<f64>,
    /// Source rows.
    pub rows: Vec<u64>,
    /// (index, kind) of non-finite and null values, increasing.
    pub specials: Vec<(usize, SpecialKind)>,
}

impl ChannelSamples {
    /// Append a chunk read from the source.
    pub fn extend(&mut self, c: ChannelChunk) {
        let base = self.values.len();
        self.times.extend_from_slice(&c.times);
        self.values.extend_from_slice(&c.values);
        self.rows.extend_from_slice(&c.rows);
        self.specials
            .extend(c.specials.into_iter().map(|(i, k)| (base + i, k)));
    }

    /// Number of samples.
    pub fn len(&self) -> usize {
        self.times.len()
    }

    /// Whether there are none.
    pub fn is_empty(&self) -> bool {
        self.times.is_empty()
    }
}

/// A run: samples without holes, in time order.
#[derive(Debug, Clone, PartialEq)]
pub struct Run {
    /// Times (ns), strictly increasing.
    pub times: Vec<i64>,
    /// Values (NaN at specials).
    pub values: Vec<f64>,
    /// (index within the run, kind), increasing.
    pub specials: Vec<(usize, SpecialKind)>,
}

/// A channel ready for segmentation.
#[derive(Debug, Clone)]
pub struct Channel {
    /// Name and type.
    pub info: ChannelInfo,
    /// Sample rate (Hz): the user's, or from the median step; `None` for a single sample.
    pub sample_rate: Option<f64>,
    /// Whether the source had to be sorted.
    pub was_sorted: bool,
    /// Runs in time order.
    pub runs: Vec<Run>,
}

/// Sort (if needed), check for duplicates, and split into runs.
pub fn assemble(
    file: &Path,
    info: ChannelInfo,
    mut s: ChannelSamples,
    sample_rate: Option<f64>,
) -> Result<Channel> {
    let sorted = s.times.windows(2).all(|w| w[0] < w[1]);
    let mut was_sorted = false;
    if !sorted {
        was_sorted = true;
        let mut order: Vec<usize> = (0..s.len()).collect();
        order.sort_by_key(|&i| (s.times[i], s.rows[i]));
        let mut kind: Vec<Option<SpecialKind>> = vec![None; s.len()];
        for &(i, k) in &s.specials {
            kind[i] = Some(k);
        }
        s.times = order.iter().map(|&i| s.times[i]).collect();
        s.values = order.iter().map(|&i| s.values[i]).collect();
        s.rows = order.iter().map(|&i| s.rows[i]).collect();
        s.specials = order
            .iter()
            .enumerate()
            .filter_map(|(j, &i)| kind[i].map(|k| (j, k)))
            .collect();
        if let Some(j) = s.times.windows(2).position(|w| w[0] == w[1]) {
            return Err(Error::DuplicateTime {
                file: file.to_path_buf(),
                channel: info.name.clone(),
                time_ns: s.times[j],
                first_row: s.rows[j].min(s.rows[j + 1]),
                row: s.rows[j].max(s.rows[j + 1]),
            });
        }
    }
    let sample_rate = sample_rate.or_else(|| median_step(&s.times).map(|d| 1e9 / d as f64));
    let limit = sample_rate.map(|fs| HOLE_FACTOR * 1e9 / fs);
    let mut runs = Vec::new();
    let mut start = 0usize;
    let mut sp = s.specials.iter().peekable();
    let n = s.len();
    for i in 1..=n {
        let cut = i == n || limit.is_some_and(|l| (s.times[i] - s.times[i - 1]) as f64 > l);
        if cut {
            let mut specials = Vec::new();
            while let Some(&&(j, k)) = sp.peek() {
                if j >= i {
                    break;
                }
                specials.push((j - start, k));
                sp.next();
            }
            runs.push(Run {
                times: s.times[start..i].to_vec(),
                values: s.values[start..i].to_vec(),
                specials,
            });
            start = i;
        }
    }
    Ok(Channel {
        info,
        sample_rate,
        was_sorted,
        runs,
    })
}

/// Median of the positive steps between consecutive times.
pub fn median_step(times: &[i64]) -> Option<i64> {
    let mut d: Vec<i64> = times
        .windows(2)
        .map(|w| w[1].wrapping_sub(w[0]))
        .filter(|&d| d > 0)
        .collect();
    if d.is_empty() {
        return None;
    }
    let mid = d.len() / 2;
    Some(*d.select_nth_unstable(mid).1)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::signal::ValueType;

    fn info() -> ChannelInfo {
        ChannelInfo {
            name: "a".into(),
            value_type: ValueType::F64,
        }
    }

    fn samples(times: &[i64]) -> ChannelSamples {
        ChannelSamples {
            times: times.to_vec(),
            values: times.iter().map(|&t| t as f64).collect(),
            rows: (0..times.len() as u64).collect(),
            specials: vec![],
        }
    }

    #[test]
    fn hole_beyond_one_and_a_half_steps_starts_a_run() {
        let c = assemble(
            Path::new("x"),
            info(),
            samples(&[0, 10, 20, 30, 46, 56]),
            None,
        )
        .unwrap();
        assert_eq!(c.runs.len(), 2);
        assert_eq!(c.runs[1].times, vec![46, 56]);
        let c = assemble(
            Path::new("x"),
            info(),
            samples(&[0, 10, 20, 30, 45, 55]),
            None,
        )
        .unwrap();
        assert_eq!(c.runs.len(), 1);
    }

    #[test]
    fn unsorted_input_is_sorted_and_duplicates_name_both_rows() {
        let c = assemble(Path::new("x"), info(), samples(&[20, 0, 10]), None).unwrap();
        assert_eq!(c.runs[0].times, vec![0, 10, 20]);
        assert_eq!(c.runs[0].values, vec![0.0, 10.0, 20.0]);
        match assemble(Path::new("x"), info(), samples(&[20, 0, 20]), None) {
            Err(Error::DuplicateTime { first_row, row, .. }) => {
                assert_eq!((first_row, row), (0, 2))
            }
            other => panic!("{other:?}"),
        }
    }
}
