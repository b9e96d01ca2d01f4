//! Jobs: what the commands do, over files — encode a source into an archive (streaming, or
//! sorting first), decode an archive back to Parquet, verify an archive against its source,
//! and run a pipeline file over many sources with a manifest.

pub mod control;
pub mod decode;
pub mod encode;
pub mod pipeline;
pub mod plan;
pub mod stream;
pub mod survey;
pub mod trend;
pub mod verify;

pub use decode::{decode_file, DecodeSummary};
pub use encode::{encode_file, EncodeSummary, JobControl};
pub use pipeline::{run, RunReport, SourceOutcome};
pub use verify::{verify, VerifyReport};
