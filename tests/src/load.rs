//! Load shapes for long-stream tests and benchmarks: many vehicles' trips in a shuffled order,
//! sent one message per HTTP/2 DATA frame the way a client that writes each trip as it arrives
//! sends them, while other clients write at the same time.

use std::pin::Pin;
use std::task::{Context, Poll};

use brakeledger_proto::v1 as pb;
use tokio_stream::Stream;

use crate::trip;

/// A deterministic shuffle (xorshift64*, Fisher–Yates) so failures reproduce.
pub fn shuffle<T>(items: &mut [T], seed: u64) {
    let mut state = seed.max(1);
    for i in (1..items.len()).rev() {
        state ^= state >> 12;
        state ^= state << 25;
        state ^= state >> 27;
        let r = state.wrapping_mul(0x2545_f491_4f6c_dd1d);
        items.swap(i, (r % (i as u64 + 1)) as usize);
    }
}

/// `per_vehicle` hourly trips for each of `vehicles` vehicles named `{prefix}-{n}` of fleet
/// "north", ending before `end_s`, in shuffled order.
pub fn shuffled_trips(prefix: &str, vehicles: usize, per_vehicle: usize, end_s: i64, seed: u64) -> Vec<pb::TripSummary> {
    let mut order: Vec<(usize, usize)> = (0..vehicles).flat_map(|v| (0..per_vehicle).map(move |n| (v, n))).collect();
    shuffle(&mut order, seed);
    order.into_iter().map(|(v, n)| trip("north", &format!("{prefix}-{v}"), n, end_s)).collect()
}

/// Yields the items of an iterator, returning `Pending` (and waking itself at once) before
/// each one, so tonic's encoder sends every message in a DATA frame of its own instead of
/// coalescing ready messages.
pub struct FramePerMessage<I> {
    items: I,
    ready: bool,
}

impl<I> FramePerMessage<I> {
    /// Wraps an iterator.
    pub fn new(items: I) -> Self {
        Self { items, ready: false }
    }
}

impl<I: Iterator + Unpin> Stream for FramePerMessage<I> {
    type Item = I::Item;
    fn poll_next(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<Option<I::Item>> {
        if !self.ready {
            self.ready = true;
            cx.waker().wake_by_ref();
            return Poll::Pending;
        }
        self.ready = false;
        Poll::Ready(self.items.next())
    }
}
