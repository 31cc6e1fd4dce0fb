//! Matching a reported outcome to the prediction it judges, through the answer's receipt
//! ([`crate::receipt`]), and recording it in the answering version's calibration.
//!
//! Nothing about an answer is kept when it is given: the receipt carries the model, version,
//! probability and scoring time, sealed. So an outcome can be reported to any replica of a
//! fleet sharing the key file, across restarts, up to the maximum age. An outcome is taken when
//! its receipt opens, names the model of the route, is no older than the maximum age, and has
//! not been reported to this process recently.
//!
//! Repeats: each process remembers the ids of the last `capacity` receipts reported to it
//! (default 200,000; by the table sizes, under 10 MB, estimated, not measured) and refuses a
//! repeat it remembers. It cannot know what other
//! replicas have seen, nor what it forgot or saw before a restart, so a caller must report each
//! outcome once; the set only catches retries that land on the same replica.
//!
//! This module does not read HTTP or compute calibration figures
//! ([`crate::monitoring::calibration`] does).

use std::collections::{HashSet, VecDeque};
use std::sync::{Mutex, PoisonError};
use std::time::Duration;

use schemars::JsonSchema;
use serde::Serialize;

use super::calibration::CalibrationMonitor;
use crate::receipt::{days, Receipt, ReceiptError, ReceiptId, ReceiptKeys};
use crate::timestamp::rfc3339_seconds;

/// Receipt ids remembered unless configured otherwise.
pub const DEFAULT_SEEN_CAPACITY: usize = 200_000;

/// The ids of the receipts most recently reported to this process, oldest forgotten first.
#[derive(Debug)]
pub struct SeenReceipts {
    capacity: usize,
    seen: Mutex<Seen>,
}

#[derive(Debug, Default)]
struct Seen {
    ids: HashSet<ReceiptId>,
    order: VecDeque<ReceiptId>,
}

impl SeenReceipts {
    /// A set remembering at most `capacity` ids (at least one).
    pub fn new(capacity: usize) -> SeenReceipts {
        SeenReceipts {
            capacity: capacity.max(1),
            seen: Mutex::new(Seen::default()),
        }
    }

    /// The most ids remembered.
    pub fn capacity(&self) -> usize {
        self.capacity
    }

    /// Ids remembered now.
    pub fn len(&self) -> usize {
        self.lock().order.len()
    }

    /// Whether no id is remembered.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    fn lock(&self) -> std::sync::MutexGuard<'_, Seen> {
        self.seen.lock().unwrap_or_else(PoisonError::into_inner)
    }

    /// Remember `id`; false if it was already remembered.
    pub fn first_time(&self, id: ReceiptId) -> bool {
        let mut seen = self.lock();
        if !seen.ids.insert(id) {
            return false;
        }
        seen.order.push_back(id);
        if seen.order.len() > self.capacity {
            if let Some(oldest) = seen.order.pop_front() {
                seen.ids.remove(&oldest);
            }
        }
        true
    }
}

/// Why an outcome was not recorded.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum OutcomeError {
    /// The receipt does not open.
    #[error("{0}")]
    Receipt(#[from] ReceiptError),
    /// The receipt is of another model than the route's.
    #[error("the receipt is of model '{receipt_model}', but the outcome was sent to model '{route_model}'")]
    OtherModel {
        /// The model the receipt names.
        receipt_model: String,
        /// The model of the route.
        route_model: String,
    },
    /// Older than the maximum age.
    #[error("the receipt is {age_days} days old; outcomes are taken up to {max_age_days} days after scoring")]
    Expired {
        /// Its age in days.
        age_days: String,
        /// The maximum age in days.
        max_age_days: String,
        /// Its age in seconds.
        age_seconds: u64,
    },
    /// This process has already recorded an outcome for this receipt.
    #[error("an outcome for receipt {receipt_id} was already reported to this replica; report each outcome once")]
    AlreadyReported {
        /// The receipt's id.
        receipt_id: String,
    },
}

/// An outcome matched to its answer and recorded.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct RecordedOutcome {
    /// The receipt's id (32 hex digits).
    pub receipt_id: String,
    /// The model that answered.
    pub model: String,
    /// The version that answered.
    pub version: String,
    /// The probability it answered.
    pub probability: f64,
    /// When it answered (RFC 3339, UTC, to the second).
    pub scored_at: String,
    /// The outcome recorded: 0 or 1.
    pub outcome: u8,
}

/// What checking and recording an outcome needs.
#[derive(Debug, Clone, Copy)]
pub struct OutcomeBook<'a> {
    /// The keys that open receipts.
    pub keys: &'a ReceiptKeys,
    /// Receipts recently reported here.
    pub seen: &'a SeenReceipts,
    /// Where outcomes are recorded.
    pub calibration: &'a CalibrationMonitor,
    /// The oldest receipt taken.
    pub max_age: Duration,
}

impl OutcomeBook<'_> {
    /// Open `token`, check it against `route_model`, the maximum age at `now_ms` and the
    /// recently seen ids, and record `outcome` for the version it names.
    pub fn report(
        &self,
        route_model: &str,
        token: &str,
        outcome: bool,
        now_ms: u64,
    ) -> Result<RecordedOutcome, OutcomeError> {
        let receipt = self.keys.open(token)?;
        check_model(&receipt, route_model)?;
        check_age(&receipt, now_ms, self.max_age)?;
        if !self.seen.first_time(receipt.id()) {
            return Err(OutcomeError::AlreadyReported {
                receipt_id: receipt.id().to_string(),
            });
        }
        self.calibration.record(
            receipt.model(),
            receipt.version(),
            receipt.probability(),
            outcome,
        );
        Ok(RecordedOutcome {
            receipt_id: receipt.id().to_string(),
            model: receipt.model().to_string(),
            version: receipt.version().to_string(),
            probability: receipt.probability(),
            scored_at: rfc3339_seconds(receipt.scored_at_ms() / 1000),
            outcome: u8::from(outcome),
        })
    }
}

fn check_model(receipt: &Receipt, route_model: &str) -> Result<(), OutcomeError> {
    if receipt.model() == route_model {
        return Ok(());
    }
    Err(OutcomeError::OtherModel {
        receipt_model: receipt.model().to_string(),
        route_model: route_model.to_string(),
    })
}

fn check_age(receipt: &Receipt, now_ms: u64, max_age: Duration) -> Result<(), OutcomeError> {
    let age = receipt.age(now_ms);
    if age <= max_age {
        return Ok(());
    }
    Err(OutcomeError::Expired {
        age_days: days(age),
        max_age_days: days(max_age),
        age_seconds: age.as_secs(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_seen_set_forgets_the_oldest_first_and_stays_bounded() {
        let seen = SeenReceipts::new(3);
        let id = |i: u8| {
            let keys = ReceiptKeys::ephemeral().expect("key");
            let token = keys
                .seal_all("m", "1", u64::from(i), [0.5].into_iter())
                .expect("sealed")
                .remove(0);
            keys.open(&token).expect("opens").id()
        };
        let ids: Vec<ReceiptId> = (0..5).map(id).collect();
        for &i in &ids[..3] {
            assert!(seen.first_time(i));
        }
        assert!(!seen.first_time(ids[0]));
        assert!(seen.first_time(ids[3]));
        assert_eq!(seen.len(), 3);
        // ids[0] was the oldest, so it is forgotten and taken again.
        assert!(seen.first_time(ids[0]));
        assert!(!seen.first_time(ids[3]));
        assert_eq!(seen.len(), 3);
    }
}
