//! Report: what `inspect` shows (per channel: segments, samples, order spread, basis mix,
//! bytes, ratio against raw f32, worst error over budget; and how the file's bytes split
//! between payload, metadata and derived columns), and the plain-text tables of the other
//! commands. JSON output serializes the same structs.
//!
//! [`inspect`](mod@inspect) gathers the data `inspect` shows, [`text`] renders every command's
//! tables and CSV, [`panels`] lays out the charts of `survey` and `trend` (drawn by
//! [`crate::plot`], placed on a page by [`crate::html`]).
//!
//! Does not: compute results (it only formats what other stages measured).

pub mod inspect;
pub mod panels;
pub mod text;

pub use inspect::{inspect, inspect_union, ByteSplit, ChannelInspect, Inspect};
pub use panels::{survey_panels, trend_panels};
pub use text::{
    bytes, encode_text, inspect_text, survey_text, table, trend_csv, trend_text, utc, verify_text,
};
