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

/// A source read batch by batch, each with the channels it met first; nothing after a
/// failed batch.
struct Reader {
    src: Source,
    /// Channels the schema held before the last batch.
    known: usize,
    done: bool,
}

impl Reader {
    fn new(src: Source) -> Self {
        let known = src.schema.channels.len();
        Reader {
            src,
            known,
            done: false,
        }
    }

    fn next(&mut self) -> Option<Batch> {
        if self.done {
            return None;
        }
        let Some(chunks) = self.src.next_chunks() else {
            self.done = true;
            return None;
        };
        self.done = chunks.is_err();
        let new_channels = self.src.schema.channels[self.known..].to_vec();
        self.known = self.src.schema.channels.len();
        Some(Batch {
            chunks,
            new_channels,
        })
    }
}

/// A source being read on its own thread, or on the consumer's.
pub struct Prefetch {
    rx: Option<Receiver<Batch>>,
    thread: Option<JoinHandle<Source>>,
    /// Read by the consumer itself ([`Prefetch::inline`]).
    here: Option<Reader>,
}

impl Prefetch {
    /// Read `src` on the consumer's own thread, a batch when asked: the same batches as
    /// [`Prefetch::start`], for a job that must keep to one thread.
    pub fn inline(src: Source) -> Prefetch {
        Prefetch {
            rx: None,
            thread: None,
            here: Some(Reader::new(src)),
        }
    }

    /// Start reading `src` on a new thread.
    pub fn start(src: Source) -> Prefetch {
        let (tx, rx) = sync_channel(PREFETCH_BATCHES);
        let thread = std::thread::spawn(move || {
            let mut reader = Reader::new(src);
            while let Some(batch) = reader.next() {
                if tx.send(batch).is_err() {
                    break;
                }
            }
            reader.src
        });
        Prefetch {
            rx: Some(rx),
            thread: Some(thread),
            here: None,
        }
    }

    /// The next batch, or None at the end of the source (or after a failed batch).
    pub fn next_batch(&mut self) -> Option<Batch> {
        match &mut self.here {
            Some(reader) => reader.next(),
            None => self.rx.as_ref()?.recv().ok(),
        }
    }

    /// Stop reading and hand the source back (its schema holds every channel met).
    pub fn finish(mut self) -> Source {
        self.stop().expect("the source is handed back once")
    }

    fn stop(&mut self) -> Option<Source> {
        if let Some(reader) = self.here.take() {
            return Some(reader.src);
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
