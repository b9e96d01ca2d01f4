//! Assemble: gather each channel's samples from the source's batches, sort them by time when
//! the source is not time-ordered, refuse duplicate (channel, time) rows, find the sample rate
//! (median step, or the user's value) and split each channel into runs at holes (a step beyond
//! 1.5× the median).
//!
//! Does not: anything Fourier (that is the codec).

use std::path::Path;

use crate::error::{Error, Result};
use crate::model::{ChannelInfo, Run, SpecialKind};
use crate::source::read::ChannelChunk;

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
        self.extend_samples(c.samples);
    }

    /// Append samples (indices of specials relative to `c`).
    pub fn extend_samples(&mut self, c: ChannelSamples) {
        if self.is_empty() {
            *self = c;
            return;
        }
        let base = self.values.len();
        self.times.extend_from_slice(&c.times);
        self.values.extend_from_slice(&c.values);
        self.rows.extend_from_slice(&c.rows);
        self.specials
            .extend(c.specials.into_iter().map(|(i, k)| (base + i, k)));
    }

    /// A copy of samples `r` (specials re-indexed).
    pub fn slice(&self, r: std::ops::Range<usize>) -> ChannelSamples {
        let lo = self.specials.partition_point(|s| s.0 < r.start);
        let hi = self.specials.partition_point(|s| s.0 < r.end);
        ChannelSamples {
            times: self.times[r.clone()].to_vec(),
            values: self.values[r.clone()].to_vec(),
            rows: self.rows[r.clone()].to_vec(),
            specials: self.specials[lo..hi]
                .iter()
                .map(|&(i, k)| (i - r.start, k))
                .collect(),
        }
    }

    /// The samples whose time `keep` accepts, in their order (specials re-indexed).
    pub fn retain_times(self, keep: impl Fn(i64) -> bool) -> ChannelSamples {
        if self.times.iter().all(|&t| keep(t)) {
            return self;
        }
        let mut out = ChannelSamples::default();
        let mut sp = self.specials.iter().peekable();
        for (i, &t) in self.times.iter().enumerate() {
            while sp.peek().is_some_and(|x| x.0 < i) {
                sp.next();
            }
            if !keep(t) {
                continue;
            }
            if let Some(&&(_, kind)) = sp.peek().filter(|x| x.0 == i) {
                out.specials.push((out.times.len(), kind));
            }
            out.times.push(t);
            out.values.push(self.values[i]);
            out.rows.push(self.rows[i]);
        }
        out
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

/// The sample rate is the median of this many first steps of a channel (or of all its steps,
/// when it has fewer): a rule that does not depend on how the file is read.
pub const RATE_STEPS: usize = 1 << 16;

/// What the assembler hands on: samples of the current run, or the end of a run.
#[derive(Debug, Clone, PartialEq)]
pub enum RunEvent {
    /// More samples of the current run.
    Samples(Run),
    /// The current run ended (a hole follows, or the channel ended).
    End,
}

/// Why streaming assembly cannot go on.
#[derive(Debug)]
pub enum StreamError {
    /// A time went backwards: the channel must be sorted, which needs all of it in memory.
    NeedsSort,
    /// A real error (duplicate time).
    Fatal(Error),
}

/// Incremental assembly of one time-ordered channel: sample rate from the first steps, holes
/// split runs, duplicates are refused. Fed in any pieces, it gives the same runs.
#[derive(Debug)]
pub struct ChannelAssembler {
    file: std::path::PathBuf,
    name: String,
    given_rate: Option<f64>,
    rate: Option<f64>,
    steps: Vec<i64>,
    /// Samples held until the rate is known.
    held: ChannelSamples,
    last: Option<(i64, u64)>,
    /// Time of the last sample released.
    released: Option<i64>,
    started: bool,
}

impl ChannelAssembler {
    /// A new channel.
    pub fn new(file: &Path, name: &str, given_rate: Option<f64>) -> Self {
        ChannelAssembler {
            file: file.to_path_buf(),
            name: name.to_string(),
            given_rate,
            rate: given_rate,
            steps: Vec::new(),
            held: ChannelSamples::default(),
            last: None,
            released: None,
            started: false,
        }
    }

    /// Time of the first sample held back (until the rate is known).
    pub fn held_first_time(&self) -> Option<i64> {
        self.held.times.first().copied()
    }

    /// The sample rate, once known.
    pub fn sample_rate(&self) -> Option<f64> {
        self.rate
    }

    /// Feed the next samples (in source order).
    pub fn push(&mut self, c: ChannelSamples) -> Result<Vec<RunEvent>, StreamError> {
        for (&t, &row) in c.times.iter().zip(&c.rows) {
            if let Some((lt, lrow)) = self.last {
                if t < lt {
                    return Err(StreamError::NeedsSort);
                }
                if t == lt {
                    return Err(StreamError::Fatal(Error::DuplicateTime {
                        file: self.file.clone(),
                        channel: self.name.clone(),
                        time_ns: t,
                        first_row: lrow,
                        row,
                    }));
                }
                if self.steps.len() < RATE_STEPS {
                    self.steps.push(t - lt);
                }
            }
            self.last = Some((t, row));
        }
        self.held.extend_samples(c);
        if self.rate.is_none() && self.steps.len() >= RATE_STEPS {
            self.rate = median(&self.steps).map(|d| 1e9 / d as f64);
        }
        Ok(if self.rate.is_some() || self.given_rate.is_some() {
            self.release()
        } else {
            Vec::new()
        })
    }

    /// The channel ended: release everything.
    pub fn finish(&mut self) -> Vec<RunEvent> {
        if self.rate.is_none() {
            self.rate = median(&self.steps).map(|d| 1e9 / d as f64);
        }
        let mut ev = self.release();
        if self.started {
            ev.push(RunEvent::End);
        }
        ev
    }

    /// Split the held samples at holes into run events.
    fn release(&mut self) -> Vec<RunEvent> {
        let held = std::mem::take(&mut self.held);
        let n = held.len();
        if n == 0 {
            return Vec::new();
        }
        let limit = self.rate.map(|fs| HOLE_FACTOR * 1e9 / fs);
        let mut out = Vec::new();
        let mut start = 0usize;
        let mut sp = held.specials.iter().peekable();
        let mut piece = |from: usize, to: usize, out: &mut Vec<RunEvent>| {
            let mut specials = Vec::new();
            while let Some(&&(j, k)) = sp.peek() {
                if j >= to {
                    break;
                }
                specials.push((j - from, k));
                sp.next();
            }
            out.push(RunEvent::Samples(Run {
                times: held.times[from..to].to_vec(),
                values: held.values[from..to].to_vec(),
                specials,
            }));
        };
        for i in 1..n {
            if limit.is_some_and(|l| (held.times[i] - held.times[i - 1]) as f64 > l) {
                piece(start, i, &mut out);
                out.push(RunEvent::End);
                start = i;
            }
        }
        piece(start, n, &mut out);
        // A hole between the previous release and this one ends the previous run.
        if let (Some(l), Some(prev)) = (limit, self.released) {
            if (held.times[0] - prev) as f64 > l {
                out.insert(0, RunEvent::End);
            }
        }
        self.released = held.times.last().copied();
        self.started = true;
        out
    }
}

fn median(steps: &[i64]) -> Option<i64> {
    let mut d: Vec<i64> = steps.iter().copied().filter(|&d| d > 0).collect();
    if d.is_empty() {
        return None;
    }
    let mid = d.len() / 2;
    Some(*d.select_nth_unstable(mid).1)
}

/// Sort a whole channel by time (stable on source row), refusing duplicate times.
pub fn sort_channel(file: &Path, name: &str, mut s: ChannelSamples) -> Result<ChannelSamples> {
    if s.times.windows(2).all(|w| w[0] < w[1]) {
        return Ok(s);
    }
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
            channel: name.to_string(),
            time_ns: s.times[j],
            first_row: s.rows[j].min(s.rows[j + 1]),
            row: s.rows[j].max(s.rows[j + 1]),
        });
    }
    Ok(s)
}

/// Sort (if needed), check for duplicates, and split into runs: the whole channel at once.
pub fn assemble(
    file: &Path,
    info: ChannelInfo,
    s: ChannelSamples,
    sample_rate: Option<f64>,
) -> Result<Channel> {
    let was_sorted = !s.times.windows(2).all(|w| w[0] < w[1]);
    let s = sort_channel(file, &info.name, s)?;
    let mut a = ChannelAssembler::new(file, &info.name, sample_rate);
    let mut events = match a.push(s) {
        Ok(e) => e,
        Err(StreamError::Fatal(e)) => return Err(e),
        Err(StreamError::NeedsSort) => unreachable!("sorted above"),
    };
    events.extend(a.finish());
    let mut runs: Vec<Run> = Vec::new();
    let mut open = false;
    for e in events {
        match e {
            RunEvent::Samples(r) => {
                if open {
                    if let Some(last) = runs.last_mut() {
                        let base = last.times.len();
                        last.times.extend(r.times);
                        last.values.extend(r.values);
                        last.specials
                            .extend(r.specials.into_iter().map(|(i, k)| (i + base, k)));
                    }
                } else {
                    runs.push(r);
                    open = true;
                }
            }
            RunEvent::End => open = false,
        }
    }
    Ok(Channel {
        info,
        sample_rate: a.sample_rate(),
        was_sorted,
        runs,
    })
}

/// Median of the positive steps between consecutive times.
pub fn median_step(times: &[i64]) -> Option<i64> {
    let steps: Vec<i64> = times.windows(2).map(|w| w[1].wrapping_sub(w[0])).collect();
    median(&steps)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::ValueType;

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
