//! Decoding an archive's blocks into channels: each block's checksum, its frame and its rows
//! cross-checked, its segments rebuilt by the codec, and the samples of each channel put
//! together in time order — all blocks, or a channel and time selection, or what is intact.

use crate::archive::reader::{block_spans, check_blocks, Archive, Hole};
use crate::archive::schema::block_checksum;
use crate::codec::decode::{rebuild_block, DecodedSegment};
use crate::codec::frame::Block;
use crate::codec::parse::decode_block;
use crate::model::{Basis, ChannelSeries};
use crate::signal::Transform;

/// A block read from an archive, checked and rebuilt.
#[derive(Debug, Clone)]
pub struct UnpackedBlock {
    /// The block's rows in the archive.
    pub rows: std::ops::Range<usize>,
    /// The archive row of each segment.
    pub row_of: Vec<usize>,
    /// The unpacked block.
    pub block: Block,
    /// Its rebuilt segments.
    pub segments: Vec<DecodedSegment>,
}

/// What one segment of an archive is, as its block's frame says.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct SegmentInfo {
    /// Channel.
    pub channel: String,
    /// Time of the first sample (ns since the epoch).
    pub start_ns: i64,
    /// Samples.
    pub samples: usize,
    /// Basis.
    pub basis: &'static str,
    /// Truncation order (Fourier bases).
    pub order: Option<u32>,
    /// Whole cycles (periodic segments).
    pub cycles: Option<u32>,
    /// Its archive row.
    pub row: usize,
    /// The peak error the segment claims (peak guard only, [`crate::codec::guard`]).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub peak: Option<f32>,
    /// Samples the peak guard corrected.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub corrected: Option<usize>,
    /// Protected bins of the segment.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub protected_bins: Option<usize>,
}

/// Every segment of the archive, in file order, from the frames (checked as by a decode,
/// but not rebuilt).
pub fn segment_list(archive: &Archive) -> Result<Vec<SegmentInfo>, crate::error::Error> {
    use rayon::prelude::*;
    let spans = block_spans(&archive.rows);
    let read: Vec<_> = spans
        .into_par_iter()
        .map(|s| read_block(archive, s))
        .collect();
    let mut out = Vec::new();
    for r in read {
        let (block, row_of) = r.map_err(|reason| crate::error::Error::Damaged {
            file: archive.path.clone(),
            reason,
        })?;
        let mut offset = 0usize;
        for (s, &row) in block.segments.iter().zip(&row_of) {
            let fourier = matches!(s.basis, Basis::Fourier | Basis::Trend);
            out.push(SegmentInfo {
                channel: archive.rows[row].channel.clone(),
                start_ns: block.times.time(offset),
                samples: s.len,
                basis: s.basis.name(),
                order: fourier.then_some(s.order),
                cycles: (s.cycles > 0).then_some(s.cycles),
                row,
                peak: s.guard.as_ref().map(|g| g.peak),
                corrected: s.guard.as_ref().map(|g| g.at.len()),
                protected_bins: s.protect.as_ref().map(|p| p.bins.len()),
            });
            offset += s.len;
        }
    }
    Ok(out)
}

/// What an archive's payload holds, for measuring the coder against what it codes.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PayloadStats {
    /// Bytes of all frames (the `payload` column less its CRC-32s).
    pub frame_bytes: usize,
    /// Segments.
    pub segments: usize,
    /// Empirical order-0 entropy of the integer codes, in bytes: one histogram over the whole
    /// archive, `Σ n_v · log₂(n / n_v) / 8` (Shannon's entropy of the codes' frequencies).
    pub order0_entropy_bytes: f64,
}

/// [`PayloadStats`] of an archive, from its frames (checksums checked, nothing rebuilt).
pub fn payload_stats(archive: &Archive) -> Result<PayloadStats, crate::error::Error> {
    let spans = block_spans(&archive.rows);
    let mut hist: std::collections::HashMap<i64, u64> = Default::default();
    let mut stats = PayloadStats {
        frame_bytes: 0,
        segments: 0,
        order0_entropy_bytes: 0.0,
    };
    for s in spans {
        let (block, _) = read_block(archive, s).map_err(|reason| crate::error::Error::Damaged {
            file: archive.path.clone(),
            reason,
        })?;
        stats.segments += block.segments.len();
        for seg in &block.segments {
            for &c in &seg.codes {
                *hist.entry(c).or_default() += 1;
            }
        }
    }
    stats.frame_bytes = archive
        .rows
        .iter()
        .filter_map(|r| r.payload.as_ref())
        .map(Vec::len)
        .sum();
    let n: u64 = hist.values().sum();
    // Summed in increasing code order, so the figure does not depend on the map's order.
    let mut counts: Vec<(i64, u64)> = hist.into_iter().collect();
    counts.sort_unstable();
    stats.order0_entropy_bytes = counts
        .iter()
        .map(|&(_, k)| k as f64 * (n as f64 / k as f64).log2())
        .sum::<f64>()
        / 8.0;
    Ok(stats)
}

/// Check a block's checksum, unpack it, cross-check it with its rows, and rebuild it.
pub fn unpack_block(
    archive: &Archive,
    rows: std::ops::Range<usize>,
    fft: &dyn Transform,
) -> Result<UnpackedBlock, String> {
    let (block, row_of) = read_block(archive, rows.clone())?;
    let id = archive.rows[rows.start].block;
    let segments = rebuild_block(&block, fft).map_err(|e| format!("block {id}: {e}"))?;
    Ok(UnpackedBlock {
        rows,
        row_of,
        block,
        segments,
    })
}

/// Check a block's checksum, unpack its frame and cross-check it with its rows; returns the
/// block and the archive row of each of its segments.
pub(crate) fn read_block(
    archive: &Archive,
    rows: std::ops::Range<usize>,
) -> Result<(Block, Vec<usize>), String> {
    let all = &archive.rows[rows.clone()];
    let first = &all[0];
    let id = first.block;
    let (Some(frame), Some(crc)) = (&first.payload, first.checksum) else {
        return Err(format!("block {id}: payload or checksum missing"));
    };
    // A payload always starts a span (see `block_spans`); a checksum must not stray either.
    if all[1..].iter().any(|r| r.checksum.is_some()) {
        return Err(format!(
            "block {id}: checksum on a row that does not start the block"
        ));
    }
    if block_checksum(frame, all) != crc {
        return Err(format!(
            "block {id}: checksum mismatch (payload or row values damaged)"
        ));
    }
    let block = decode_block(frame).map_err(|e| format!("block {id}: {e}"))?;
    let channel = archive
        .meta
        .channels
        .iter()
        .find(|c| c.name == first.channel)
        .ok_or_else(|| {
            format!(
                "block {id}: channel `{}` not in the metadata",
                first.channel
            )
        })?;
    if block.value_type != channel.value_type {
        return Err(format!("block {id}: value type differs from the metadata"));
    }
    // Each row covers whole consecutive segments: its samples end on a segment boundary and
    // it starts at its first segment's first sample.
    let mut row_of = Vec::with_capacity(block.segments.len());
    let mut offset = 0usize;
    let mut segs = block.segments.iter().peekable();
    for (ri, r) in all.iter().enumerate() {
        let disagrees = || {
            format!(
                "block {id}: row at {} ns disagrees with the payload",
                r.start_ns
            )
        };
        if r.channel != first.channel
            || r.samples == 0
            || segs.peek().is_none()
            || r.start_ns != block.times.time(offset)
        {
            return Err(disagrees());
        }
        let mut covered = 0usize;
        while covered < r.samples as usize {
            let Some(s) = segs.next() else {
                return Err(disagrees());
            };
            covered += s.len;
            row_of.push(rows.start + ri);
        }
        if covered != r.samples as usize {
            return Err(disagrees());
        }
        offset += covered;
    }
    if segs.next().is_some() {
        return Err(format!(
            "block {id}: the payload has segments beyond its rows"
        ));
    }
    if !block.times.residuals.is_empty() && block.times.residuals.len() != offset {
        return Err(format!(
            "block {id}: timestamp residuals do not cover the block"
        ));
    }
    Ok((block, row_of))
}

/// Decode the selected channels (all when `channels` is empty), keeping samples with
/// `from ≤ t < to`. Blocks outside the range are not unpacked. The archive must be whole:
/// a missing, repeated or damaged block is [`crate::error::Error::Damaged`], naming the channel and
/// the block (see [`check_blocks`]).
pub fn decode_channels(
    archive: &Archive,
    channels: &[String],
    from: Option<i64>,
    to: Option<i64>,
    fft: &dyn Transform,
) -> Result<Vec<ChannelSeries>, crate::error::Error> {
    decode_selected(archive, channels, from, to, fft, false).map(|d| d.series)
}

/// What a salvaging decode rebuilt, and the holes it left.
#[derive(Debug, Clone, Default)]
pub struct Salvaged {
    /// The channels, without the rows of missing or damaged blocks.
    pub series: Vec<ChannelSeries>,
    /// Every block left out and every channel whose rows do not add up.
    pub holes: Vec<Hole>,
}

/// Decode what is intact: like [`decode_channels`], but a missing block is reported, a
/// repeated one is read once, and a damaged one is left out and reported, instead of
/// refusing the archive.
pub fn decode_salvage(
    archive: &Archive,
    channels: &[String],
    from: Option<i64>,
    to: Option<i64>,
    fft: &dyn Transform,
) -> Result<Salvaged, crate::error::Error> {
    decode_selected(archive, channels, from, to, fft, true)
}

fn decode_selected(
    archive: &Archive,
    channels: &[String],
    from: Option<i64>,
    to: Option<i64>,
    fft: &dyn Transform,
    salvage: bool,
) -> Result<Salvaged, crate::error::Error> {
    use rayon::prelude::*;
    let damaged = |reason: String| crate::error::Error::Damaged {
        file: archive.path.clone(),
        reason,
    };
    let mut holes = check_blocks(archive);
    if !salvage && !holes.is_empty() {
        let list: Vec<String> = holes.iter().map(|h| h.to_string()).collect();
        return Err(damaged(format!(
            "blocks missing or out of place: {}",
            list.join("; ")
        )));
    }
    let mut spans = block_spans(&archive.rows);
    if salvage {
        // Read each block number once: its first copy.
        let mut seen = std::collections::BTreeSet::new();
        spans.retain(|s| seen.insert(archive.rows[s.start].block));
    }
    let wanted = |name: &str| channels.is_empty() || channels.iter().any(|c| c == name);
    // A block starting at or after `to` is outside the range; so is a block whose channel's
    // next block starts at or before `from` (all its samples come earlier).
    let mut next_start: std::collections::HashMap<&str, i64> = std::collections::HashMap::new();
    let mut selected = Vec::new();
    for s in spans.into_iter().rev() {
        let row = &archive.rows[s.start];
        if !wanted(&row.channel) {
            continue;
        }
        let before_from = match (from, next_start.get(row.channel.as_str())) {
            (Some(f), Some(&n)) => n <= f,
            _ => false,
        };
        next_start.insert(row.channel.as_str(), row.start_ns);
        if !before_from && to.is_none_or(|t| row.start_ns < t) {
            selected.push(s);
        }
    }
    selected.reverse();
    let results: Vec<(std::ops::Range<usize>, Result<UnpackedBlock, String>)> = selected
        .into_par_iter()
        .map(|s| (s.clone(), unpack_block(archive, s, fft)))
        .collect();
    let mut unpacked = Vec::with_capacity(results.len());
    for (span, r) in results {
        match r {
            Ok(u) => unpacked.push(u),
            Err(reason) if salvage => {
                let row = &archive.rows[span.start];
                holes.push(Hole {
                    channel: Some(row.channel.clone()),
                    block: Some(row.block),
                    what: format!(
                        "left out, {} rows from {} ns: {reason}",
                        archive.rows[span]
                            .iter()
                            .map(|r| r.samples as u64)
                            .sum::<u64>(),
                        row.start_ns
                    ),
                });
            }
            Err(reason) => return Err(damaged(reason)),
        }
    }
    let mut out: Vec<ChannelSeries> = Vec::new();
    for ub in unpacked {
        let name = &archive.rows[ub.rows.start].channel;
        if out.last().is_none_or(|c| &c.name != name) {
            out.push(ChannelSeries {
                name: name.clone(),
                ..Default::default()
            });
        }
        let Some(series) = out.last_mut() else {
            continue;
        };
        let mut offset = 0usize;
        for (&row, seg) in ub.row_of.iter().zip(&ub.segments) {
            let begin = series.times.len();
            let mut sp = seg.specials.iter().peekable();
            for (i, &v) in seg.values.iter().enumerate() {
                let t = ub.block.times.time(offset + i);
                let special = match sp.peek() {
                    Some(s) if s.index as usize == i => sp.next().map(|s| s.kind),
                    _ => None,
                };
                if from.is_some_and(|f| t < f) || to.is_some_and(|e| t >= e) {
                    continue;
                }
                if let Some(k) = special {
                    series.specials.push((series.times.len(), k));
                }
                series.times.push(t);
                series.values.push(v);
            }
            offset += seg.values.len();
            if series.times.len() > begin {
                series.segments.push((row, begin..series.times.len()));
                series.peaks.push(seg.peak);
                series.protected.push(seg.protected.clone());
            }
        }
    }
    // Channels may appear in several places only if the archive was written out of order;
    // merge by name, keeping time order.
    out.sort_by(|a, b| a.name.cmp(&b.name));
    out.dedup_by(|b, a| {
        if a.name != b.name {
            return false;
        }
        let base = a.times.len();
        a.times.append(&mut b.times);
        a.values.append(&mut b.values);
        a.specials
            .extend(b.specials.iter().map(|&(i, k)| (i + base, k)));
        a.segments.extend(
            b.segments
                .iter()
                .map(|(r, s)| (*r, s.start + base..s.end + base)),
        );
        a.peaks.append(&mut b.peaks);
        a.protected.append(&mut b.protected);
        true
    });
    Ok(Salvaged { series: out, holes })
}
