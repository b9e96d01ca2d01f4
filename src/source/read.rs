//! Read: scan a Parquet source by record batches (64k rows), map its columns to the long
//! (`time`, `channel`, `value`) or wide (`time` plus one numeric column per channel) layout,
//! and convert times to epoch nanoseconds and values to f64 with the non-finite and null
//! values kept exactly aside.
//!
//! Does not: sort, split into runs or judge the data (that is `assemble`).

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use arrow::array::{Array, ArrayRef, AsArray, PrimitiveArray};
use arrow::datatypes::{
    DataType, FieldRef, Float32Type, Float64Type, Int16Type, Int32Type, Int64Type, Schema,
    TimeUnit, TimestampMicrosecondType, TimestampMillisecondType, TimestampNanosecondType,
    TimestampSecondType,
};
use parquet::arrow::arrow_reader::{
    ArrowReaderMetadata, ArrowReaderOptions, ParquetRecordBatchReader,
    ParquetRecordBatchReaderBuilder,
};
use parquet::arrow::ProjectionMask;
use parquet::file::metadata::KeyValue;

use crate::error::{Error, Result};
use crate::fsio::{contain, open_parquet, READ_BATCH_ROWS};
use crate::model::{
    ChannelInfo, DictKey, Layout, NameType, SourceSchema, SpecialKind, TimeType, ValueType,
};
use crate::source::{ChannelSamples, Mapping};

/// Samples of one channel from one batch, in source row order.
#[derive(Debug, Default, Clone)]
pub struct ChannelChunk {
    /// Index into [`SourceSchema::channels`].
    pub channel: usize,
    /// Times, values, source rows and special values (indices into this chunk).
    pub samples: ChannelSamples,
}

/// A Parquet source being scanned.
pub struct Source {
    /// Path.
    pub path: PathBuf,
    /// Schema mapping.
    pub schema: SourceSchema,
    reader: ParquetRecordBatchReader,
    time_idx: usize,
    channel_idx: Option<usize>,
    value_idx: Vec<(usize, usize)>,
    names: HashMap<String, usize>,
    wanted: Option<Vec<String>>,
    long_vt: ValueType,
    row: u64,
    /// Nanoseconds per unit of the time arrays as the reader returns them.
    read_scale: i64,
    /// Rows in the file.
    pub total_rows: u64,
    /// Only rows in `[from, to)` ns ([`Mapping::window`]).
    window: Option<(i64, i64)>,
}

/// The time column's type as the writer of the file declared it, from the Arrow schema
/// embedded in the file's metadata (`ARROW:schema`). Parquet has no seconds unit and stores
/// zoned times as UTC, so a `timestamp(s, Europe/Berlin)` column is stored as milliseconds
/// adjusted to UTC; the Parquet reader keeps the embedded zone and unit only in some cases.
fn declared_time_type(kv: Option<&Vec<KeyValue>>, column: &str) -> Option<TimeType> {
    use base64::Engine;
    let encoded = kv?
        .iter()
        .find(|e| e.key == "ARROW:schema")?
        .value
        .as_deref()?;
    let bytes = base64::engine::general_purpose::STANDARD
        .decode(encoded)
        .ok()?;
    // An IPC message, after an optional continuation marker and length.
    let body = if bytes.len() > 8 && bytes[0..4] == [255u8; 4] {
        &bytes[8..]
    } else {
        &bytes[..]
    };
    let message = arrow_ipc::root_as_message(body).ok()?;
    let schema = arrow_ipc::convert::try_fb_to_schema(message.header_as_schema()?).ok()?;
    let field = schema.field_with_name(column).ok()?;
    time_type_of(field.data_type())
}

fn value_type_of(dt: &DataType) -> Option<ValueType> {
    Some(match dt {
        DataType::Float64 => ValueType::F64,
        DataType::Float32 => ValueType::F32,
        DataType::Int16 => ValueType::I16,
        DataType::Int32 => ValueType::I32,
        _ => return None,
    })
}

fn time_type_of(dt: &DataType) -> Option<TimeType> {
    match dt {
        DataType::Timestamp(u, tz) => Some(TimeType::Timestamp {
            unit: match u {
                TimeUnit::Second => "s",
                TimeUnit::Millisecond => "ms",
                TimeUnit::Microsecond => "us",
                TimeUnit::Nanosecond => "ns",
            }
            .into(),
            tz: tz.as_ref().map(|s| s.to_string()),
        }),
        DataType::Int64 => Some(TimeType::Int64Nanos),
        _ => None,
    }
}

fn name_type_of(dt: &DataType) -> Option<NameType> {
    match dt {
        DataType::Utf8 => Some(NameType::Utf8),
        DataType::LargeUtf8 => Some(NameType::LargeUtf8),
        DataType::Dictionary(k, v) if matches!(**v, DataType::Utf8 | DataType::LargeUtf8) => {
            let key = match **k {
                DataType::Int8 => DictKey::Int8,
                DataType::Int16 => DictKey::Int16,
                DataType::Int32 => DictKey::Int32,
                DataType::Int64 => DictKey::Int64,
                DataType::UInt8 => DictKey::UInt8,
                DataType::UInt16 => DictKey::UInt16,
                DataType::UInt32 => DictKey::UInt32,
                DataType::UInt64 => DictKey::UInt64,
                _ => return None,
            };
            Some(NameType::Dictionary {
                key,
                large: **v == DataType::LargeUtf8,
            })
        }
        _ => None,
    }
}

impl Source {
    /// Open a source and map its columns according to the mapping.
    pub fn open(path: &Path, mapping: &Mapping) -> Result<Source> {
        let builder = open_parquet(path)?;
        let file = path.to_path_buf();
        let arrow_schema = builder.schema().clone();
        let total_rows = builder.metadata().file_metadata().num_rows().max(0) as u64;
        let fields = arrow_schema.fields();
        let available = fields
            .iter()
            .map(|f| format!("{} ({})", f.name(), f.data_type()))
            .collect::<Vec<_>>()
            .join(", ");
        let find = |name: &str| fields.iter().position(|f| f.name() == name);
        // A name the mapping uses must name one column: refuse a repeated one, rather than
        // read one of the two and archive it twice (or drop the other).
        let unique = |name: &str| -> Result<()> {
            let mut at = fields.iter().enumerate().filter(|(_, f)| f.name() == name);
            match (at.next(), at.next()) {
                (Some((first, _)), Some((second, _))) => Err(Error::DuplicateColumn {
                    file: file.clone(),
                    column: name.to_string(),
                    first,
                    second,
                }),
                _ => Ok(()),
            }
        };
        unique(&mapping.time_column)?;
        let time_idx = find(&mapping.time_column).ok_or_else(|| Error::MissingColumn {
            file: file.clone(),
            column: mapping.time_column.clone(),
            available: available.clone(),
        })?;
        let read_type =
            time_type_of(fields[time_idx].data_type()).ok_or_else(|| Error::WrongType {
                file: file.clone(),
                column: mapping.time_column.clone(),
                found: fields[time_idx].data_type().to_string(),
                expected: "Timestamp (any unit, with or without zone) or Int64 epoch ns".into(),
            })?;
        let read_scale = read_type.nanos_per_unit();
        // Keep the zone and unit the file's writer declared for a timestamp column (the
        // instants are the same; see `declared_time_type`). A coarser declared unit is kept
        // only while every time is a whole number of it (checked as rows are read).
        let time_type = match (
            &read_type,
            declared_time_type(
                builder.metadata().file_metadata().key_value_metadata(),
                &mapping.time_column,
            ),
        ) {
            (TimeType::Timestamp { .. }, Some(d @ TimeType::Timestamp { .. })) => d,
            _ => read_type,
        };
        let channel_col = find(&mapping.channel_column);
        let value_col = find(&mapping.value_column);
        let numeric: Vec<usize> = (0..fields.len())
            .filter(|&i| i != time_idx && Some(i) != channel_col)
            .filter(|&i| value_type_of(fields[i].data_type()).is_some())
            .collect();
        let layout = match mapping.layout {
            Some(l) => l,
            None => match (channel_col, value_col) {
                (Some(_), Some(_)) => Layout::Long,
                (None, _) if !numeric.is_empty() => Layout::Wide,
                (Some(_), None) => {
                    return Err(Error::Layout {
                        file,
                        reason: format!(
                            "has a `{}` column but no `{}` column; name the value column \
                             (--value-column) or pass --layout wide",
                            mapping.channel_column, mapping.value_column
                        ),
                    })
                }
                _ => {
                    return Err(Error::Layout {
                        file,
                        reason: format!(
                            "cannot tell the layout: no numeric value columns besides the time \
                             (columns: {available})"
                        ),
                    })
                }
            },
        };
        let mut source_schema = SourceSchema {
            layout,
            time_column: mapping.time_column.clone(),
            time_type,
            channel_column: None,
            name_type: None,
            value_column: None,
            channels: Vec::new(),
        };
        let mut value_idx = Vec::new();
        let mut long_vt = ValueType::F64;
        let mut projection = vec![time_idx];
        let channel_idx = match layout {
            Layout::Long => {
                let ci = channel_col.ok_or_else(|| Error::MissingColumn {
                    file: file.clone(),
                    column: mapping.channel_column.clone(),
                    available: available.clone(),
                })?;
                let vi = value_col.ok_or_else(|| Error::MissingColumn {
                    file: file.clone(),
                    column: mapping.value_column.clone(),
                    available: available.clone(),
                })?;
                unique(&mapping.channel_column)?;
                unique(&mapping.value_column)?;
                let nt = name_type_of(fields[ci].data_type()).ok_or_else(|| Error::WrongType {
                    file: file.clone(),
                    column: mapping.channel_column.clone(),
                    found: fields[ci].data_type().to_string(),
                    expected: "Utf8, LargeUtf8 or Dictionary(Utf8)".into(),
                })?;
                let vt = value_type_of(fields[vi].data_type()).ok_or_else(|| Error::WrongType {
                    file: file.clone(),
                    column: mapping.value_column.clone(),
                    found: fields[vi].data_type().to_string(),
                    expected: "Float64, Float32, Int16 or Int32".into(),
                })?;
                source_schema.channel_column = Some(mapping.channel_column.clone());
                source_schema.name_type = Some(nt);
                source_schema.value_column = Some(mapping.value_column.clone());
                projection.push(ci);
                projection.push(vi);
                value_idx.push((vi, 0));
                long_vt = vt;
                Some(ci)
            }
            Layout::Wide => {
                let mut wanted: Vec<usize> = match &mapping.channels {
                    Some(list) => list
                        .iter()
                        .map(|c| {
                            find(c).ok_or_else(|| Error::MissingColumn {
                                file: file.clone(),
                                column: c.clone(),
                                available: available.clone(),
                            })
                        })
                        .collect::<Result<_>>()?,
                    None => {
                        // Every other column of a wide file is a channel: one that cannot be
                        // archived is refused by name, never left out silently.
                        let odd = (0..fields.len()).find(|&i| {
                            i != time_idx && value_type_of(fields[i].data_type()).is_none()
                        });
                        if let Some(i) = odd {
                            return Err(Error::WrongType {
                                file,
                                column: fields[i].name().clone(),
                                found: fields[i].data_type().to_string(),
                                expected: "Float64, Float32, Int16 or Int32 (in the wide layout \
                                           every column is a channel; name the channels to \
                                           archive with --channels to leave it out)"
                                    .into(),
                            });
                        }
                        (0..fields.len()).filter(|&i| i != time_idx).collect()
                    }
                };
                // In the file's column order, each once, whatever the order of `--channels`.
                wanted.sort_unstable();
                wanted.dedup();
                if wanted.is_empty() {
                    return Err(Error::Layout {
                        file,
                        reason: format!("no numeric channel columns (columns: {available})"),
                    });
                }
                for &i in &wanted {
                    unique(fields[i].name())?;
                    let vt =
                        value_type_of(fields[i].data_type()).ok_or_else(|| Error::WrongType {
                            file: file.clone(),
                            column: fields[i].name().clone(),
                            found: fields[i].data_type().to_string(),
                            expected: "Float64, Float32, Int16 or Int32".into(),
                        })?;
                    value_idx.push((i, source_schema.channels.len()));
                    source_schema.channels.push(ChannelInfo {
                        name: fields[i].name().clone(),
                        value_type: vt,
                    });
                    projection.push(i);
                }
                None
            }
        };
        // Column positions after projection keep the file's order.
        let mut sorted = projection.clone();
        sorted.sort_unstable();
        sorted.dedup();
        let pos = |i: usize| sorted.iter().position(|&j| j == i).unwrap_or(0);
        // A long layout's names are read as a dictionary (the parquet crate keeps the
        // pages' own dictionary), so that a row is matched by its key, not by its text.
        let builder = match channel_idx {
            Some(ci) if fields[ci].data_type() == &DataType::Utf8 => {
                let mut hinted: Vec<FieldRef> = fields.iter().cloned().collect();
                hinted[ci] = Arc::new(fields[ci].as_ref().clone().with_data_type(
                    DataType::Dictionary(Box::new(DataType::Int32), Box::new(DataType::Utf8)),
                ));
                let schema = Schema::new_with_metadata(hinted, arrow_schema.metadata().clone());
                let options = ArrowReaderOptions::new().with_schema(Arc::new(schema));
                let meta = ArrowReaderMetadata::try_new(builder.metadata().clone(), options);
                match meta {
                    Ok(meta) => {
                        let f = std::fs::File::open(path).map_err(|e| Error::Open {
                            file: file.clone(),
                            source: e,
                        })?;
                        ParquetRecordBatchReaderBuilder::new_with_metadata(f, meta)
                    }
                    Err(_) => builder,
                }
            }
            _ => builder,
        };
        let mask = ProjectionMask::roots(builder.parquet_schema(), sorted.iter().copied());
        let reader = builder
            .with_projection(mask)
            .with_batch_size(READ_BATCH_ROWS)
            .build()
            .map_err(|e| Error::NotParquet {
                file: file.clone(),
                reason: e.to_string(),
            })?;
        let value_idx = value_idx
            .into_iter()
            .map(|(col, ch)| (pos(col), ch))
            .collect();
        Ok(Source {
            path: file,
            schema: source_schema,
            reader,
            time_idx: pos(time_idx),
            channel_idx: channel_idx.map(pos),
            value_idx,
            names: HashMap::new(),
            wanted: if layout == Layout::Long {
                mapping.channels.clone()
            } else {
                None
            },
            long_vt,
            row: 0,
            read_scale,
            total_rows,
            window: mapping.window,
        })
    }

    /// Read the next batch, split by channel. `None` at the end of the file.
    pub fn next_chunks(&mut self) -> Option<Result<Vec<ChannelChunk>>> {
        let chunks = self.read_chunks()?;
        let Some((from, to)) = self.window else {
            return Some(chunks);
        };
        Some(chunks.map(|cs| {
            cs.into_iter()
                .map(|c| ChannelChunk {
                    channel: c.channel,
                    samples: c.samples.retain_times(|t| from <= t && t < to),
                })
                .collect()
        }))
    }

    fn read_chunks(&mut self) -> Option<Result<Vec<ChannelChunk>>> {
        let next = contain(|| self.reader.next());
        let batch = match next {
            Ok(None) => return None,
            Ok(Some(Ok(b))) => b,
            Ok(Some(Err(e))) => {
                return Some(Err(Error::NotParquet {
                    file: self.path.clone(),
                    reason: e.to_string(),
                }))
            }
            Err(_) => {
                return Some(Err(Error::NotParquet {
                    file: self.path.clone(),
                    reason: format!("the Parquet reader failed near row {}", self.row),
                }))
            }
        };
        let first_row = self.row;
        self.row += batch.num_rows() as u64;
        Some(self.split(batch, first_row))
    }

    fn split(
        &mut self,
        batch: arrow::record_batch::RecordBatch,
        first_row: u64,
    ) -> Result<Vec<ChannelChunk>> {
        let times = self.times(batch.column(self.time_idx), first_row)?;
        match self.channel_idx {
            Some(ci) => {
                // Names as a dictionary (see `open`): each key is looked up once a batch;
                // any other string type is compared row by row.
                let col = batch.column(ci);
                let (names, keys) = match col.data_type() {
                    DataType::Dictionary(k, v)
                        if **k == DataType::Int32 && **v == DataType::Utf8 =>
                    {
                        let d = col.as_dictionary::<Int32Type>();
                        (d.values().clone(), Some(d.keys()))
                    }
                    _ => {
                        let cast = arrow::compute::cast(col, &DataType::Utf8).map_err(|e| {
                            Error::NotParquet {
                                file: self.path.clone(),
                                reason: e.to_string(),
                            }
                        })?;
                        (cast, None)
                    }
                };
                let names = names.as_string::<i32>();
                let mut by_key: Vec<Option<usize>> = vec![None; keys.map_or(0, |_| names.len())];
                let vt = self.long_vt;
                let column = batch.column(self.value_idx[0].0).clone();
                let values = ValueColumn::of(&column, vt);
                let mut chunks: Vec<ChannelChunk> = Vec::new();
                // The names met in this batch, each with its chunk (None: not a wanted
                // channel), and the last one met: rows of a long layout repeat a few names,
                // so a short scan usually finds the name without hashing it.
                let mut met: Vec<(&str, Option<usize>)> = Vec::new();
                let mut met_at: HashMap<&str, usize> = HashMap::new();
                let mut last = usize::MAX;
                for (i, &t) in times.iter().enumerate() {
                    let id = match keys {
                        Some(k) if k.is_valid(i) => Some(k.value(i) as usize),
                        _ => None,
                    };
                    let row_name = id.unwrap_or(i);
                    if (keys.is_some() && id.is_none()) || names.is_null(row_name) {
                        return Err(Error::NullChannel {
                            file: self.path.clone(),
                            column: self.schema.channel_column.clone().unwrap_or_default(),
                            row: first_row + i as u64,
                        });
                    }
                    let name = names.value(row_name);
                    let at = if let Some(j) = id.and_then(|k| by_key[k]) {
                        j
                    } else if met.get(last).is_some_and(|m| m.0 == name) {
                        last
                    } else if let Some(j) = if met.len() <= SCAN_NAMES {
                        met.iter().position(|m| m.0 == name)
                    } else {
                        met_at.get(name).copied()
                    } {
                        j
                    } else {
                        let wanted = self
                            .wanted
                            .as_ref()
                            .is_none_or(|w| w.iter().any(|c| c == name));
                        let s = wanted.then(|| {
                            let ch = match self.names.get(name) {
                                Some(&c) => c,
                                None => {
                                    let c = self.schema.channels.len();
                                    self.schema.channels.push(ChannelInfo {
                                        name: name.to_string(),
                                        value_type: vt,
                                    });
                                    self.names.insert(name.to_string(), c);
                                    c
                                }
                            };
                            chunks.push(ChannelChunk {
                                channel: ch,
                                ..Default::default()
                            });
                            chunks.len() - 1
                        });
                        met.push((name, s));
                        met_at.insert(name, met.len() - 1);
                        met.len() - 1
                    };
                    last = at;
                    if let Some(k) = id {
                        by_key[k] = Some(at);
                    }
                    let Some(s) = met[at].1 else {
                        continue;
                    };
                    let chunk = &mut chunks[s];
                    push_value(chunk, &values, i);
                    chunk.samples.times.push(t);
                    chunk.samples.rows.push(first_row + i as u64);
                }
                Ok(chunks)
            }
            None => {
                let mut chunks = Vec::with_capacity(self.value_idx.len());
                for &(col, ch) in &self.value_idx {
                    let vt = self.schema.channels[ch].value_type;
                    let column = batch.column(col).clone();
                    let values = ValueColumn::of(&column, vt);
                    let mut chunk = ChannelChunk {
                        channel: ch,
                        samples: ChannelSamples {
                            times: times.clone(),
                            rows: (first_row..first_row + times.len() as u64).collect(),
                            ..Default::default()
                        },
                    };
                    for i in 0..times.len() {
                        push_value(&mut chunk, &values, i);
                    }
                    chunks.push(chunk);
                }
                Ok(chunks)
            }
        }
    }

    fn times(&mut self, col: &ArrayRef, first_row: u64) -> Result<Vec<i64>> {
        let scale = self.read_scale;
        let raw: Vec<Option<i64>> = match col.data_type() {
            DataType::Timestamp(TimeUnit::Second, _) => {
                col.as_primitive::<TimestampSecondType>().iter().collect()
            }
            DataType::Timestamp(TimeUnit::Millisecond, _) => col
                .as_primitive::<TimestampMillisecondType>()
                .iter()
                .collect(),
            DataType::Timestamp(TimeUnit::Microsecond, _) => col
                .as_primitive::<TimestampMicrosecondType>()
                .iter()
                .collect(),
            DataType::Timestamp(TimeUnit::Nanosecond, _) => col
                .as_primitive::<TimestampNanosecondType>()
                .iter()
                .collect(),
            DataType::Int64 => col.as_primitive::<Int64Type>().iter().collect(),
            other => {
                return Err(Error::WrongType {
                    file: self.path.clone(),
                    column: self.schema.time_column.clone(),
                    found: other.to_string(),
                    expected: "Timestamp or Int64".into(),
                })
            }
        };
        raw.into_iter()
            .enumerate()
            .map(|(i, t)| {
                let t = t.ok_or_else(|| Error::NullTime {
                    file: self.path.clone(),
                    column: self.schema.time_column.clone(),
                    row: first_row + i as u64,
                })?;
                t.checked_mul(scale).ok_or_else(|| Error::WrongType {
                    file: self.path.clone(),
                    column: self.schema.time_column.clone(),
                    found: format!("a time at row {} beyond the ns range", first_row + i as u64),
                    expected: "times within ±292 years of 1970".into(),
                })
            })
            .collect::<Result<Vec<i64>>>()
            .inspect(|times| self.keep_exact_unit(times))
    }

    /// Fall back to the unit the times were read in when a declared coarser unit would not
    /// hold them exactly (the zone stays).
    fn keep_exact_unit(&mut self, times: &[i64]) {
        let unit = self.schema.time_type.nanos_per_unit();
        if unit > self.read_scale && times.iter().any(|t| t % unit != 0) {
            if let TimeType::Timestamp { unit, .. } = &mut self.schema.time_type {
                *unit = match self.read_scale {
                    1_000_000 => "ms",
                    1_000 => "us",
                    _ => "ns",
                }
                .into();
            }
        }
    }
}

/// Append value i of `col` to the chunk, recording nulls and non-finite values.
/// Up to this many channel names in a batch are found by a scan, more by hashing.
const SCAN_NAMES: usize = 16;

/// A value column of a batch, its type looked up once per batch rather than once per row.
enum ValueColumn<'a> {
    F64(&'a PrimitiveArray<Float64Type>),
    F32(&'a PrimitiveArray<Float32Type>),
    I16(&'a PrimitiveArray<Int16Type>),
    I32(&'a PrimitiveArray<Int32Type>),
}

impl<'a> ValueColumn<'a> {
    fn of(col: &'a ArrayRef, vt: ValueType) -> Self {
        match vt {
            ValueType::F64 => ValueColumn::F64(col.as_primitive()),
            ValueType::F32 => ValueColumn::F32(col.as_primitive()),
            ValueType::I16 => ValueColumn::I16(col.as_primitive()),
            ValueType::I32 => ValueColumn::I32(col.as_primitive()),
        }
    }

    fn is_null(&self, i: usize) -> bool {
        match self {
            ValueColumn::F64(a) => a.is_null(i),
            ValueColumn::F32(a) => a.is_null(i),
            ValueColumn::I16(a) => a.is_null(i),
            ValueColumn::I32(a) => a.is_null(i),
        }
    }
}

fn push_value(chunk: &mut ChannelChunk, col: &ValueColumn<'_>, i: usize) {
    let idx = chunk.samples.values.len();
    if col.is_null(i) {
        chunk.samples.values.push(f64::NAN);
        chunk.samples.specials.push((idx, SpecialKind::Null));
        return;
    }
    let v = match col {
        ValueColumn::F64(a) => a.value(i),
        ValueColumn::F32(a) => {
            let f = a.value(i);
            if f.is_nan() {
                chunk.samples.values.push(f64::NAN);
                chunk
                    .samples
                    .specials
                    .push((idx, SpecialKind::Nan(f.to_bits() as u64)));
                return;
            }
            f as f64
        }
        ValueColumn::I16(a) => a.value(i) as f64,
        ValueColumn::I32(a) => a.value(i) as f64,
    };
    if v.is_nan() {
        chunk.samples.values.push(f64::NAN);
        chunk
            .samples
            .specials
            .push((idx, SpecialKind::Nan(v.to_bits())));
    } else if v == f64::INFINITY {
        chunk.samples.values.push(f64::NAN);
        chunk.samples.specials.push((idx, SpecialKind::PosInf));
    } else if v == f64::NEG_INFINITY {
        chunk.samples.values.push(f64::NAN);
        chunk.samples.specials.push((idx, SpecialKind::NegInf));
    } else {
        chunk.samples.values.push(v);
    }
}
