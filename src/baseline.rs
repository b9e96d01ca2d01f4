//! Baselines: what a user would do instead, measured on the same segments and budgets —
//! the error-bounded time-domain quantizer (step √12·ε, shrunk until the segment meets its
//! budget) with zstd level 19; lossless Parquet (BYTE_STREAM_SPLIT + zstd); raw f32; and the
//! Gaussian rate-distortion reference for codecs that code segments independently.
//!
//! Used by the tests and the benchmark; not by the archive itself.

use std::sync::Arc;

use arrow::array::{Float64Array, RecordBatch};
use arrow::datatypes::{DataType, Field, Schema};
use parquet::arrow::ArrowWriter;
use parquet::basic::{Compression, Encoding, ZstdLevel};
use parquet::file::properties::WriterProperties;

use crate::codec::encode::{finite_rms, plan_run, RunParams};
use crate::codec::fit::fit_samples;
use crate::codec::params::MAX_BUDGET;
use crate::model::Run;
use crate::signal::{fill_non_finite, Transform};

/// Bytes of the time-domain quantizer + zstd -19 on a run, with cyclarc's segmentation and
/// per-segment budgets: quantized integers at the narrowest width that holds them (i8, i16
/// or i32, little-endian) followed by each segment's step as f32, all in one zstd frame.
pub fn time_domain_bytes(run: &Run, p: &RunParams<'_>) -> usize {
    let plan = plan_run(run, p);
    let mut codes: Vec<i64> = Vec::with_capacity(run.values.len());
    let mut steps: Vec<f32> = Vec::new();
    for s in &plan.segments {
        let x = &run.values[s.start..s.start + s.len];
        let budget = p.budget.resolve(finite_rms(x)).unwrap_or(MAX_BUDGET);
        let mut filled = x.to_vec();
        fill_non_finite(&mut filled);
        let round = p
            .value_type
            .rounding_mse(filled.iter().fold(0.0f64, |a, v| a.max(v.abs())));
        match fit_samples(x, &filled, p.value_type, budget, round) {
            Some(f) => {
                let q = if f.plan.predicted {
                    crate::codec::quant::undelta_codes(&f.codes)
                } else {
                    f.codes
                };
                codes.extend(q);
                steps.push(f.plan.step);
            }
            None => {
                // Budget below the output resolution: the values themselves (integers) or
                // their bits, as a lossless quantizer would.
                codes.extend(filled.iter().map(|v| v.to_bits() as i64));
                steps.push(0.0);
            }
        }
    }
    let max = codes.iter().map(|c| c.unsigned_abs()).max().unwrap_or(0);
    let mut bytes = Vec::with_capacity(codes.len() * 4);
    if max < 128 {
        bytes.extend(codes.iter().map(|&c| c as i8 as u8));
    } else if max < 32_768 {
        codes
            .iter()
            .for_each(|&c| bytes.extend_from_slice(&(c as i16).to_le_bytes()));
    } else if max < (1 << 31) {
        codes
            .iter()
            .for_each(|&c| bytes.extend_from_slice(&(c as i32).to_le_bytes()));
    } else {
        codes
            .iter()
            .for_each(|&c| bytes.extend_from_slice(&c.to_le_bytes()));
    }
    steps
        .iter()
        .for_each(|s| bytes.extend_from_slice(&s.to_le_bytes()));
    zstd::bulk::compress(&bytes, 19).map_or(bytes.len(), |c| c.len())
}

/// Bytes of the lossless Parquet a user would otherwise keep: one Float64 column written by
/// the parquet crate with BYTE_STREAM_SPLIT encoding (dictionary off) and zstd.
pub fn lossless_parquet_bytes(values: &[f64]) -> usize {
    let schema = Arc::new(Schema::new(vec![Field::new(
        "value",
        DataType::Float64,
        true,
    )]));
    let props = WriterProperties::builder()
        .set_compression(Compression::ZSTD(ZstdLevel::try_new(9).unwrap_or_default()))
        .set_dictionary_enabled(false)
        .set_encoding(Encoding::BYTE_STREAM_SPLIT)
        .build();
    let mut buf = Vec::new();
    let ok = (|| -> Result<(), parquet::errors::ParquetError> {
        let mut w = ArrowWriter::try_new(&mut buf, schema.clone(), Some(props))?;
        for chunk in values.chunks(1 << 16) {
            let arr = Float64Array::from(chunk.to_vec());
            let batch = RecordBatch::try_new(schema.clone(), vec![Arc::new(arr)])
                .map_err(|e| parquet::errors::ParquetError::General(e.to_string()))?;
            w.write(&batch)?;
        }
        w.close()?;
        Ok(())
    })();
    if ok.is_ok() {
        buf.len()
    } else {
        values.len() * 8
    }
}

/// Gaussian rate-distortion reference in bytes (Cover & Thomas, "Elements of Information
/// Theory", reverse water-filling): each segment's orthonormal real coefficients are treated
/// as independent Gaussians with variance c²; the water level λ is set so that the distortion
/// Σ min(λ, σ²) equals the segment's error energy budget N·ε², and the rate is
/// R = Σ max(0, ½·log₂(σ²/λ)) bits.
pub fn rate_distortion_bytes(run: &Run, p: &RunParams<'_>, fft: &dyn Transform) -> f64 {
    let plan = plan_run(run, p);
    let mut bits = 0.0;
    for s in &plan.segments {
        let x = &run.values[s.start..s.start + s.len];
        let budget = p.budget.resolve(finite_rms(x)).unwrap_or(MAX_BUDGET);
        let mut filled = x.to_vec();
        fill_non_finite(&mut filled);
        let c = fft.forward(&filled);
        let n = s.len;
        // Real components: DC and Nyquist have one, other bins two (re, im, each weighted
        // like the bin's mirror pair: energy 2·re² and 2·im²).
        let mut var: Vec<f64> = Vec::with_capacity(n);
        for (k, ck) in c.iter().enumerate() {
            let w = crate::signal::weight(k, n);
            var.push(w * ck.re * ck.re);
            if !crate::signal::is_real_bin(k, n) {
                var.push(w * ck.im * ck.im);
            }
        }
        let d_total = n as f64 * budget * budget;
        bits += water_fill_bits(&var, d_total);
    }
    bits / 8.0
}

/// Reverse water-filling: rate in bits for component variances `var` at total distortion `d`.
pub fn water_fill_bits(var: &[f64], d: f64) -> f64 {
    let total: f64 = var.iter().sum();
    if !(d > 0.0) || d >= total {
        return if d > 0.0 { 0.0 } else { f64::INFINITY };
    }
    // Find λ with Σ min(λ, σ²) = d by bisection on λ ∈ (0, max σ²].
    let (mut lo, mut hi) = (0.0f64, var.iter().fold(0.0f64, |a, &v| a.max(v)));
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        let dist: f64 = var.iter().map(|&v| v.min(mid)).sum();
        if dist > d {
            hi = mid;
        } else {
            lo = mid;
        }
    }
    let lambda = 0.5 * (lo + hi);
    var.iter()
        .filter(|&&v| v > lambda)
        .map(|&v| 0.5 * (v / lambda).log2())
        .sum()
}
