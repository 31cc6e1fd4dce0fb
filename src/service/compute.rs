//! Where scoring runs and how much of it may be under way: heavy requests leave the actix I/O
//! workers for a bounded pool, and three caps keep the process's memory and CPU bounded
//! whatever callers send.
//!
//! ```text
//! inline         a body of at most INLINE_BODY_BYTES (16 KiB: one observation, or a handful)
//!                is parsed and scored on the I/O worker, where a thread hop would cost more
//!                than the work
//! pool           anything larger runs on the blocking pool, at most `compute_threads` jobs at
//!                once (a semaphore; the default is one per core), so a 10,000-observation
//!                batch never holds an I/O worker and the single-observation requests queued
//!                behind it
//! work budget    observations × terms² above `max_work_units` → 413 work-over-budget before
//!                any scoring starts (terms² is the delta-method cost of one observation)
//! in flight      observations admitted and not yet written out above
//!                `max_inflight_observations` → 503 overloaded with Retry-After; an admission
//!                is released when the answer's last byte has been handed to the connection;
//!                a request of at most ALWAYS_ADMITTED (16) observations is never refused
//! body bytes     request bodies being read at once above `max_inflight_body_bytes` → 503
//!                overloaded with Retry-After (the body's bytes are reserved as they arrive)
//! ```
//!
//! This module counts and schedules; it computes nothing itself.

use std::pin::Pin;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Arc;
use std::task::{Context, Poll};

use actix_web::body::{BodySize, BoxBody, MessageBody};
use actix_web::web::Bytes;
use tokio::sync::Semaphore;

use super::config::Limits;
use super::problem::{Kind, Problem};

/// Bodies up to this size are parsed and scored on the I/O worker.
pub const INLINE_BODY_BYTES: usize = 16 * 1024;

/// Requests of at most this many observations are never refused for load: their memory is a
/// few kilobytes each, bounded by the connection limit, and a single applicant's request must
/// not wait behind batches.
pub const ALWAYS_ADMITTED: usize = 16;

/// Seconds a client refused for load is told to wait (`Retry-After`): long enough for a full
/// batch to finish on a loaded core, short enough that a retrying caller loses little.
pub const RETRY_AFTER_SECONDS: u32 = 1;

/// The pool and the in-flight counts of one process.
#[derive(Debug)]
pub struct Compute {
    permits: Semaphore,
    threads: usize,
    observations: AtomicUsize,
    max_observations: usize,
    body_bytes: AtomicUsize,
    max_body_bytes: usize,
    max_work_units: u64,
}

impl Compute {
    /// The pool for these limits, with `threads` jobs at once (0: one per available core).
    pub fn new(limits: &Limits) -> Compute {
        let threads = match limits.compute_threads {
            0 => std::thread::available_parallelism().map_or(1, |n| n.get()),
            n => n,
        };
        Compute {
            permits: Semaphore::new(threads),
            threads,
            observations: AtomicUsize::new(0),
            max_observations: limits.max_inflight_observations,
            body_bytes: AtomicUsize::new(0),
            max_body_bytes: limits.max_inflight_body_bytes,
            max_work_units: limits.max_work_units,
        }
    }

    /// How many jobs may run at once.
    pub fn threads(&self) -> usize {
        self.threads
    }

    /// Observations admitted and not yet written out.
    pub fn observations_in_flight(&self) -> usize {
        self.observations.load(Ordering::SeqCst)
    }

    /// Request body bytes being held while read.
    pub fn body_bytes_in_flight(&self) -> usize {
        self.body_bytes.load(Ordering::SeqCst)
    }

    /// Run `job` on the blocking pool once one of the pool's places is free.
    pub async fn run<T: Send + 'static>(
        &self,
        job: impl FnOnce() -> T + Send + 'static,
    ) -> Result<T, Problem> {
        let _permit = self
            .permits
            .acquire()
            .await
            .map_err(|e| Problem::internal(&e))?;
        tokio::task::spawn_blocking(job)
            .await
            .map_err(|e| Problem::internal(&format!("a scoring job failed: {e}")))
    }

    /// Refuse a request whose work, `observations × terms²`, is over the budget.
    pub fn check_budget(&self, observations: usize, terms: usize) -> Result<(), Problem> {
        let units =
            (observations as u64).saturating_mul((terms as u64).saturating_mul(terms as u64));
        if units <= self.max_work_units {
            return Ok(());
        }
        let per_observation = (terms as u64).saturating_mul(terms as u64).max(1);
        let most = self.max_work_units / per_observation;
        Err(Problem::new(
            Kind::WorkOverBudget,
            format!(
                "{observations} observations × {terms}² terms is {units} units of work; the limit per request is {}: send at most {most} observations of this model at once",
                self.max_work_units
            ),
        )
        .limit(self.max_work_units))
    }

    /// Admit `count` observations, or refuse with 503 while too many are in flight. The
    /// admission is released when dropped.
    pub fn admit(self: &Arc<Self>, count: usize) -> Result<Admission, Problem> {
        let admitted = self
            .observations
            .fetch_update(Ordering::SeqCst, Ordering::SeqCst, |now| {
                let after = now.checked_add(count)?;
                // One request alone is always admitted when nothing else is in flight, so a
                // batch at the batch limit cannot be refused for ever.
                (after <= self.max_observations || now == 0 || count <= ALWAYS_ADMITTED)
                    .then_some(after)
            })
            .is_ok();
        if !admitted {
            return Err(overloaded(format!(
                "{} observations are being scored or written out; the limit is {}, and this request adds {count}",
                self.observations_in_flight(),
                self.max_observations
            ))
            .limit(self.max_observations as u64));
        }
        Ok(Admission {
            compute: Arc::clone(self),
            observations: count,
        })
    }

    /// Reserve `bytes` more of request body, or refuse with 503 while too much is being read.
    pub fn reserve_body(self: &Arc<Self>, bytes: usize) -> Result<BodyReservation, Problem> {
        let mut reservation = BodyReservation {
            compute: Arc::clone(self),
            bytes: 0,
        };
        reservation.grow(bytes)?;
        Ok(reservation)
    }
}

/// The 503 of a load limit, with its Retry-After.
fn overloaded(detail: String) -> Problem {
    Problem::new(Kind::Overloaded, detail).retry_after(RETRY_AFTER_SECONDS)
}

/// Observations admitted by [`Compute::admit`]; released on drop.
#[derive(Debug)]
pub struct Admission {
    compute: Arc<Compute>,
    observations: usize,
}

impl Drop for Admission {
    fn drop(&mut self) {
        self.compute
            .observations
            .fetch_sub(self.observations, Ordering::SeqCst);
    }
}

/// Body bytes reserved by [`Compute::reserve_body`]; released on drop.
#[derive(Debug)]
pub struct BodyReservation {
    compute: Arc<Compute>,
    bytes: usize,
}

impl BodyReservation {
    /// Reserve `more` bytes, or refuse with 503 (the bytes already held stay reserved until
    /// the reservation is dropped).
    pub fn grow(&mut self, more: usize) -> Result<(), Problem> {
        let compute = &self.compute;
        let held = self.bytes;
        let reserved = compute
            .body_bytes
            .fetch_update(Ordering::SeqCst, Ordering::SeqCst, |now| {
                let after = now.checked_add(more)?;
                (after <= compute.max_body_bytes || now == held).then_some(after)
            })
            .is_ok();
        if !reserved {
            return Err(overloaded(format!(
                "{} bytes of request bodies are being read; the limit is {}",
                compute.body_bytes_in_flight(),
                compute.max_body_bytes
            ))
            .limit(compute.max_body_bytes as u64));
        }
        self.bytes += more;
        Ok(())
    }
}

impl Drop for BodyReservation {
    fn drop(&mut self) {
        self.compute
            .body_bytes
            .fetch_sub(self.bytes, Ordering::SeqCst);
    }
}

/// A response body that holds an [`Admission`] until its last byte is handed to the connection
/// (or the connection is dropped), so that a client slow to read its answer keeps counting
/// against the in-flight limit.
pub struct Admitted {
    body: Bytes,
    admission: Option<Admission>,
}

impl Admitted {
    /// `body`, holding `admission` while it is written.
    pub fn boxed(body: Vec<u8>, admission: Admission) -> BoxBody {
        BoxBody::new(Admitted {
            body: Bytes::from(body),
            admission: Some(admission),
        })
    }
}

/// The most bytes handed to the connection at once: actix buffers what it is given, so a
/// large answer goes out in slices as the client reads, not copied whole into the write buffer.
const SLICE_BYTES: usize = 64 * 1024;

impl MessageBody for Admitted {
    type Error = std::convert::Infallible;

    fn size(&self) -> BodySize {
        BodySize::Sized(self.body.len() as u64)
    }

    fn poll_next(
        mut self: Pin<&mut Self>,
        _: &mut Context<'_>,
    ) -> Poll<Option<Result<Bytes, Self::Error>>> {
        if self.body.is_empty() {
            self.admission = None;
            return Poll::Ready(None);
        }
        let take = self.body.len().min(SLICE_BYTES);
        let slice = self.body.split_to(take);
        Poll::Ready(Some(Ok(slice)))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn compute(max_observations: usize, max_body: usize, budget: u64) -> Arc<Compute> {
        let limits = Limits {
            max_inflight_observations: max_observations,
            max_inflight_body_bytes: max_body,
            max_work_units: budget,
            compute_threads: 1,
            ..Limits::default()
        };
        Arc::new(Compute::new(&limits))
    }

    #[test]
    fn admissions_are_refused_over_the_limit_and_released_on_drop() {
        let c = compute(100, 100, 1_000);
        let first = c.admit(60).expect("room");
        assert_eq!(c.admit(50).expect_err("over").kind, Kind::Overloaded);
        let second = c.admit(40).expect("room");
        assert_eq!(c.observations_in_flight(), 100);
        // A small request is admitted even now.
        let small = c.admit(ALWAYS_ADMITTED).expect("small");
        drop((first, second, small));
        assert_eq!(c.observations_in_flight(), 0);
        // Alone, a request larger than the limit still gets in.
        let alone = c.admit(500).expect("alone");
        let refused = c.admit(ALWAYS_ADMITTED + 1).expect_err("over");
        assert_eq!(refused.retry_after, Some(RETRY_AFTER_SECONDS));
        drop(alone);
    }

    #[test]
    fn body_bytes_are_reserved_as_they_arrive_and_released_on_drop() {
        let c = compute(10, 100, 1_000);
        let mut a = c.reserve_body(60).expect("room");
        let mut b = c.reserve_body(30).expect("room");
        assert_eq!(b.grow(20).expect_err("over").kind, Kind::Overloaded);
        a.grow(10).expect("room");
        drop(b);
        assert_eq!(c.body_bytes_in_flight(), 70);
        drop(a);
        assert_eq!(c.body_bytes_in_flight(), 0);
    }

    #[test]
    fn the_work_budget_counts_observations_times_terms_squared() {
        let c = compute(10, 100, 10_000);
        assert!(c.check_budget(100, 10).is_ok());
        let problem = c.check_budget(101, 10).expect_err("over");
        assert_eq!(problem.kind, Kind::WorkOverBudget);
        assert!(
            problem.detail.contains("at most 100 observations"),
            "{}",
            problem.detail
        );
        assert!(c.check_budget(usize::MAX, usize::MAX).is_err());
    }
}
