//! Library-level tests of the codec: closed forms, FFT references, drift, ECG, order
//! inflation, properties and compression ratios, each checked against an outside source
//! named beside its check.
#[path = "../support/mod.rs"]
mod support;

mod bands;
mod closed_forms;
mod coder;
mod drift;
mod ecg;
mod events;
mod fft_reference;
mod fundamental;
mod guard;
mod order_inflation;
mod properties;
mod ratio;
mod trend;
