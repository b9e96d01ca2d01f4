//! Prefetch: a [`Source`] read on its own thread, one batch ahead of its consumer, so that
//! decoding the next row group overlaps with whatever the consumer does with the last one.
//!
//! Batches arrive in file order, each with the channels the source met for the first time in
//! it, so the consumer sees exactly what it would see calling [`Source::next_chunks`] itself.
//!
//! A job that must keep to one thread reads through [`Prefetch::inline`] instead: the same
//! batches, read when asked.
//!
//! Does not: change what is read, or its order.

use std::sync::mpsc::{sync_channel, Receiver};
use std::thread::JoinHandle;

use crate::error::Result;
use crate::model::ChannelInfo;
use crate::source::{ChannelChunk, Source};

/// Batches decoded ahead of the consumer (besides the one it holds).
pub const PREFETCH_BATCHES: usize = 2;

/// One batch: its chunks (or the error reading it), and the channels first met in it.
pub struct Batch {
    /// What [`Source::next_chunks`] returned.
    pub chunks: Result<Vec<ChannelChunk>>,
    /// Channels added to the source's schema by this batch, in index order.
    pub new_channels: Vec<ChannelInfo>,
}

/// A source being read on its own thread.
pub struct Prefetch {
    rx: Option<Receiver<Batch>>,
    thread: Option<JoinHandle<Source>>,
    /// Read by the consumer itself ([`Prefetch::inline`]): the source, the channels it knew,
    /// and whether it is done.
    here: Option<(Source, usize, bool)>,
}

impl Prefetch {
    /// Read `src` on the consumer's own thread, a batch when asked: the same batches as
    /// [`Prefetch::start`], for a job that must keep to one thread.
    pub fn inline(src: Source) -> Prefetch {
        let known = src.schema.channels.len();
        Prefetch {
            rx: None,
            thread: None,
            here: Some((src, known, false)),
        }
    }

    /// Start reading `src` on a new thread.
    pub fn start(mut src: Source) -> Prefetch {
        let (tx, rx) = sync_channel(PREFETCH_BATCHES);
        let thread = std::thread::spawn(move || {
            let mut known = src.schema.channels.len();
            while let Some(chunks) = src.next_chunks() {
                let failed = chunks.is_err();
                let new_channels = src.schema.channels[known..].to_vec();
                known = src.schema.channels.len();
                if tx
                    .send(Batch {
                        chunks,
                        new_channels,
                    })
                    .is_err()
                    || failed
                {
                    break;
                }
            }
            src
        });
        Prefetch {
            rx: Some(rx),
            thread: Some(thread),
            here: None,
        }
    }

    /// The next batch, or None at the end of the source (or after a failed batch).
    pub fn next_batch(&mut self) -> Option<Batch> {
        if let Some((src, known, done)) = &mut self.here {
            if *done {
                return None;
            }
            let Some(chunks) = src.next_chunks() else {
                *done = true;
                return None;
            };
            *done = chunks.is_err();
            let new_channels = src.schema.channels[*known..].to_vec();
            *known = src.schema.channels.len();
            return Some(Batch {
                chunks,
                new_channels,
            });
        }
        self.rx.as_ref()?.recv().ok()
    }

    /// Stop reading and hand the source back (its schema holds every channel met).
    pub fn finish(mut self) -> Source {
        self.stop().expect("the source is handed back once")
    }

    fn stop(&mut self) -> Option<Source> {
        if let Some((src, _, _)) = self.here.take() {
            return Some(src);
        }
        // Dropping the receiver ends a reader blocked on a full channel.
        self.rx = None;
        let thread = self.thread.take()?;
        Some(
            thread
                .join()
                .unwrap_or_else(|p| std::panic::resume_unwind(p)),
        )
    }
}

impl Drop for Prefetch {
    fn drop(&mut self) {
        if !std::thread::panicking() {
            self.stop();
        }
    }
}
