//! Recent answers by id, so that an observed outcome reported later can be matched to the
//! prediction it judges, and the matching itself: an outcome for a known answer goes into its
//! version's calibration window.
//!
//! Answer ids: a request scoring one observation (`"observation": {...}`) gives one answer whose
//! id is the request id, `ID`; a request scoring a batch (`"observations": [...]`) gives answers
//! `ID/0`, `ID/1`, … in batch order, so the 4th observation of a batch is `ID/3` (a batch of
//! one is `ID/0`). An id is looked up first as a whole, then split at its last `/`, so request
//! ids that themselves contain `/` still resolve.
//!
//! Memory is bounded: the store holds at most `capacity` answers (default 50,000). Each answer
//! keeps its probability, its linear index and its outcome once reported (24 bytes); each
//! request keeps its id (inline up to 38 bytes, so a UUID needs no allocation) and the number
//! of the model version that answered (versions are named once, in a list that grows by one
//! per version ever served). Measured, a single-observation request costs about 125 bytes, so
//! the default store stays under 7 MB; the ring and the index are allocated at their full size
//! once, so they never reallocate. When a new request would exceed the capacity, whole requests
//! are evicted oldest first and their answers counted in `ogive_answers_evicted_total`; a
//! single batch larger than the whole capacity keeps its first `capacity` answers and counts
//! the rest as evicted at once. A request id seen again replaces the earlier request's answers
//! (they count as evicted).
//!
//! Layout: requests sit in one ring, oldest first, numbered by arrival; an index maps the hash
//! of each request id to its number, and a lookup checks the stored id, so a hash collision
//! (odds about n²/2⁶⁵) can only make the older of two requests unfindable, never match the
//! wrong one. A replaced request stays in the ring as an empty slot until it reaches the front;
//! slots count toward the capacity too, so the ring never outgrows it. Evicting a request does
//! not touch the index (its entry, numbered before the ring's front, is simply stale); stale
//! entries are swept out together once they reach a quarter of the capacity.
//!
//! Concurrency: the request path never waits for the store. It builds the request's entry
//! (copying the id, hashing it, boxing a batch's answers) outside any lock, then puts it in the
//! ring if the store's lock is free, and otherwise in a bounded lock-free inbox (1,024
//! requests) that the lock's holder or the next caller drains. Reporting an outcome takes the
//! lock and drains the inbox first, so an answer kept before its response was written is always
//! found. Only a full inbox (1,024 requests arriving while the lock is held) makes a request
//! wait for the lock. The store's series are read from it when scraped, so keeping an answer
//! writes no shared counter. Unlike the drift windows, an answer is never dropped under
//! contention: an outcome reported for it later must find it.
//!
//! This module does not score, know HTTP, or compute calibration figures
//! ([`crate::metrics::calibration`] does).

use std::collections::hash_map::RandomState;
use std::collections::{HashMap, VecDeque};
use std::hash::{BuildHasher, BuildHasherDefault, Hasher};
use std::sync::mpsc::{sync_channel, Receiver, SyncSender, TrySendError};
use std::sync::{Arc, Mutex, MutexGuard, PoisonError, TryLockError};

use arc_swap::ArcSwap;
use prometheus::core::{Collector, Desc};
use prometheus::proto::MetricFamily;
use prometheus::{IntCounter, IntGauge, Opts, Registry};
use schemars::JsonSchema;
use serde::Serialize;

use super::calibration::CalibrationMonitor;
use crate::model::Model;

/// Answers kept unless configured otherwise.
pub const DEFAULT_CAPACITY: usize = 50_000;

/// One answer as kept for a later outcome.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct StoredAnswer {
    /// The predicted probability.
    pub probability: f64,
    /// The linear index.
    pub linear_index: f64,
    /// The outcome, once reported.
    outcome: Option<bool>,
}

impl StoredAnswer {
    /// An answer with no outcome yet.
    pub fn new(probability: f64, linear_index: f64) -> StoredAnswer {
        StoredAnswer {
            probability,
            linear_index,
            outcome: None,
        }
    }
}

/// The answers of one request: one observation (id `ID`) or a batch (ids `ID/i`). A single
/// answer is held inline, saving an allocation per request on the commonest path.
#[derive(Debug)]
enum Answers {
    Single(StoredAnswer),
    Batch(Box<[StoredAnswer]>),
}

impl Answers {
    fn len(&self) -> usize {
        match self {
            Answers::Single(_) => 1,
            Answers::Batch(b) => b.len(),
        }
    }
}

/// Ids up to this many bytes (a UUID has 36) are kept inline, without an allocation.
const INLINE_ID: usize = 38;

/// A request id as the store keeps it.
#[derive(Debug)]
enum StoredId {
    Inline(u8, [u8; INLINE_ID]),
    Heap(Box<[u8]>),
}

impl StoredId {
    fn new(id: &str) -> StoredId {
        let bytes = id.as_bytes();
        match u8::try_from(bytes.len()) {
            Ok(len) if bytes.len() <= INLINE_ID => {
                let mut inline = [0; INLINE_ID];
                inline[..bytes.len()].copy_from_slice(bytes);
                StoredId::Inline(len, inline)
            }
            _ => StoredId::Heap(Box::from(bytes)),
        }
    }

    fn empty() -> StoredId {
        StoredId::Inline(0, [0; INLINE_ID])
    }

    fn as_bytes(&self) -> &[u8] {
        match self {
            StoredId::Inline(len, bytes) => &bytes[..usize::from(*len)],
            StoredId::Heap(bytes) => bytes,
        }
    }
}

/// The answers of one request, or an empty slot left by a request whose id was reused.
#[derive(Debug)]
struct Request {
    /// The request id; empty for an empty slot.
    id: StoredId,
    /// The id's hash, the index's key.
    hash: u64,
    /// The answering version, as its place in [`AnswerStore::versions`].
    version: u32,
    answers: Answers,
}

impl Request {
    fn is_empty_slot(&self) -> bool {
        self.id.as_bytes().is_empty()
    }

    /// Turn into an empty slot; returns how many answers it held.
    fn vacate(&mut self) -> usize {
        let held = if self.is_empty_slot() {
            0
        } else {
            self.answers.len()
        };
        self.id = StoredId::empty();
        self.answers = Answers::Batch(Box::new([]));
        held
    }
}

/// The index's keys are already SipHash outputs of the ids (keyed per process), so the index
/// uses them as they are instead of hashing them a second time.
#[derive(Debug, Default)]
struct PreHashed(u64);

impl Hasher for PreHashed {
    fn finish(&self) -> u64 {
        self.0
    }

    fn write(&mut self, bytes: &[u8]) {
        // Only `u64` keys reach this hasher; fold anything else in rather than panic.
        for &b in bytes {
            self.0 = self.0.rotate_left(8) ^ u64::from(b);
        }
    }

    fn write_u64(&mut self, value: u64) {
        self.0 = value;
    }
}

/// Requests waiting in the inbox, with the answers already cut from an oversized batch.
type Pending = (Request, usize);

#[derive(Debug)]
struct Store {
    /// Requests, oldest first; `ring[i]` arrived as number `front + i`.
    ring: VecDeque<Request>,
    front: u64,
    /// Hash of a request id → its arrival number.
    index: HashMap<u64, u64, BuildHasherDefault<PreHashed>>,
    /// Answers held (empty slots hold none).
    held: usize,
    /// Answers evicted (or cut from oversized batches) since the store was made.
    evicted: u64,
    /// Requests sent by the request path and not yet in the ring.
    inbox: Receiver<Pending>,
}

impl Store {
    /// The ring position of the request with this id and hash.
    fn position(&self, id: &str, hash: u64) -> Option<usize> {
        let number = *self.index.get(&hash)?;
        let position = usize::try_from(number.checked_sub(self.front)?).ok()?;
        let request = self.ring.get(position)?;
        (request.id.as_bytes() == id.as_bytes()).then_some(position)
    }

    /// Remove the oldest slot; returns how many answers it held. Its index entry stays: an
    /// entry whose number is below `front` is stale, and [`Store::insert`] sweeps stale entries
    /// out in bulk. (Removing it here would cost a cache miss per eviction, the largest single
    /// cost of keeping an answer.)
    fn pop_oldest(&mut self) -> usize {
        let Some(oldest) = self.ring.pop_front() else {
            return 0;
        };
        self.front += 1;
        if oldest.is_empty_slot() {
            return 0;
        }
        self.held -= oldest.answers.len();
        oldest.answers.len()
    }

    /// Put one request in the ring, evicting the oldest while over `capacity`; returns how many
    /// answers were evicted.
    fn insert(&mut self, request: Request, capacity: usize) -> usize {
        let mut evicted = 0;
        let number = self.front + self.ring.len() as u64;
        if let Some(earlier) = self.index.insert(request.hash, number) {
            let position = earlier.checked_sub(self.front).map(|p| p as usize);
            if let Some(replaced) = position.and_then(|p| self.ring.get_mut(p)) {
                let gone = replaced.vacate();
                self.held -= gone;
                evicted += gone;
            }
        }
        // Make room before pushing, so the ring and the index never outgrow the size they were
        // allocated with. Popping keeps `front + ring.len()`, so `number` stays right.
        let incoming = request.answers.len();
        while !self.ring.is_empty()
            && (self.held + incoming > capacity || self.ring.len() >= capacity)
        {
            evicted += self.pop_oldest();
        }
        self.held += incoming;
        self.ring.push_back(request);
        // Stale entries may add a quarter of the capacity before one sequential sweep drops them
        // all; the index was sized for that, so it never reallocates.
        if self.index.len() > capacity + capacity / 4 {
            let front = self.front;
            self.index.retain(|_, number| *number >= front);
        }
        evicted
    }

    /// Put one request, and the count of answers cut from it, in the ring.
    fn admit(&mut self, (request, cut): Pending, capacity: usize) {
        let evicted = cut + self.insert(request, capacity);
        self.evicted += evicted as u64;
    }

    /// Move every request waiting in the inbox into the ring.
    fn drain(&mut self, capacity: usize) {
        while let Ok(pending) = self.inbox.try_recv() {
            self.admit(pending, capacity);
        }
    }
}

/// An outcome could not be matched.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum OutcomeError {
    /// No answer of this model has this id: it was never given, or has been evicted.
    #[error("model '{model}' has no answer with id '{answer_id}' (never given, or evicted since)")]
    NotFound {
        /// The model named in the report.
        model: String,
        /// The id reported.
        answer_id: String,
    },
    /// The answer already has an outcome.
    #[error("answer '{answer_id}' already has outcome {outcome}")]
    AlreadyReported {
        /// The id reported.
        answer_id: String,
        /// The outcome recorded first.
        outcome: u8,
    },
}

/// An answer matched to its outcome.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct MatchedAnswer {
    /// The answer's id.
    pub answer_id: String,
    /// The model that answered.
    pub model: String,
    /// The version that answered.
    pub version: String,
    /// The probability it predicted.
    pub probability: f64,
    /// The linear index it computed.
    pub linear_index: f64,
    /// The observed outcome, 0 or 1.
    pub outcome: u8,
}

/// The store's size, for the monitoring report.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, JsonSchema)]
pub struct StoreSummary {
    /// Answers held now.
    pub held: usize,
    /// The most answers held.
    pub capacity: usize,
    /// Answers evicted since the process started.
    pub evicted_total: u64,
}

/// Requests that may wait in the inbox before the request path takes the store's lock itself.
const INBOX: usize = 1024;

/// A model version that has answered, by name.
#[derive(Debug, Clone, PartialEq, Eq)]
struct VersionName {
    model: Box<str>,
    version: Box<str>,
}

/// Recent answers by id, bounded in memory.
#[derive(Debug)]
pub struct AnswerStore {
    capacity: usize,
    hasher: RandomState,
    /// Every version that has answered, in order of first answer; requests name theirs by its
    /// place here, which costs no reference count on the request path. It grows by one entry
    /// per version ever served.
    versions: ArcSwap<Vec<VersionName>>,
    versions_writer: Mutex<()>,
    inbox: SyncSender<Pending>,
    store: Mutex<Store>,
}

/// Why the answer store could not be set up.
#[derive(Debug, thiserror::Error)]
pub enum StoreSetupError {
    /// The capacity is zero.
    #[error("the answer store must hold at least one answer, got {0}")]
    EmptyStore(usize),
    /// The metrics could not be registered (a name already taken in the registry).
    #[error("registering the answer-store metrics: {0}")]
    Metrics(#[from] prometheus::Error),
}

impl AnswerStore {
    /// A store of at most `capacity` answers, its series registered in `registry`:
    ///
    /// ```text
    /// ogive_answers_evicted_total   counter
    /// ogive_answers_held            gauge
    /// ```
    ///
    /// Both are read from the store when scraped, so keeping an answer updates no shared
    /// counter.
    pub fn new(capacity: usize, registry: &Registry) -> Result<Arc<AnswerStore>, StoreSetupError> {
        if capacity == 0 {
            return Err(StoreSetupError::EmptyStore(capacity));
        }
        let (inbox, receiver) = sync_channel(INBOX);
        let store = Arc::new(AnswerStore {
            capacity,
            hasher: RandomState::new(),
            versions: ArcSwap::from_pointee(Vec::new()),
            versions_writer: Mutex::new(()),
            inbox,
            // Sized once: growing by doubling would leave the old blocks behind in the heap.
            store: Mutex::new(Store {
                ring: VecDeque::with_capacity(capacity),
                front: 0,
                index: HashMap::with_capacity_and_hasher(
                    capacity + capacity / 4 + 1,
                    Default::default(),
                ),
                held: 0,
                evicted: 0,
                inbox: receiver,
            }),
        });
        let collector = StoreCollector {
            store: Arc::clone(&store),
            evicted: IntCounter::with_opts(Opts::new(
                "ogive_answers_evicted_total",
                "Answers evicted from the answer store before an outcome could be reported for them.",
            ))?,
            held: IntGauge::with_opts(Opts::new(
                "ogive_answers_held",
                "Answers held in the answer store, awaiting outcomes.",
            ))?,
            descs: Vec::new(),
        }
        .with_descs();
        registry.register(Box::new(collector))?;
        Ok(store)
    }

    /// The most answers held.
    pub fn capacity(&self) -> usize {
        self.capacity
    }

    /// Keep the answer to a single-observation request: its id is `request_id`.
    pub fn keep_single(&self, request_id: &str, model: &Model, answer: StoredAnswer) {
        self.keep(request_id, model, Answers::Single(answer), 0);
    }

    /// Keep the answers to a batch request, in batch order: their ids are `request_id/i`.
    pub fn keep_batch(&self, request_id: &str, model: &Model, mut answers: Vec<StoredAnswer>) {
        let over = answers.len().saturating_sub(self.capacity);
        answers.truncate(self.capacity);
        if answers.is_empty() {
            return;
        }
        self.keep(
            request_id,
            model,
            Answers::Batch(answers.into_boxed_slice()),
            over,
        );
    }

    /// Store one request's answers without waiting: straight into the ring if the lock is
    /// free (draining the inbox first, to keep arrival order), otherwise into the inbox, which
    /// the lock's holder or the next caller drains. Only a full inbox makes the caller wait for
    /// the lock. `cut` answers were already cut from an oversized batch.
    fn keep(&self, request_id: &str, model: &Model, answers: Answers, cut: usize) {
        let request = Request {
            id: StoredId::new(request_id),
            hash: self.hasher.hash_one(request_id.as_bytes()),
            version: self.version_number(model),
            answers,
        };
        if request_id.is_empty() {
            // An empty id could never be reported against; the service always sets one.
            self.locked().evicted += (request.answers.len() + cut) as u64;
            return;
        }
        let pending = match self.store.try_lock() {
            Ok(mut store) => {
                store.drain(self.capacity);
                store.admit((request, cut), self.capacity);
                return;
            }
            Err(TryLockError::Poisoned(poisoned)) => {
                let mut store = poisoned.into_inner();
                store.drain(self.capacity);
                store.admit((request, cut), self.capacity);
                return;
            }
            Err(TryLockError::WouldBlock) => (request, cut),
        };
        if let Err(TrySendError::Full(pending) | TrySendError::Disconnected(pending)) =
            self.inbox.try_send(pending)
        {
            let mut store = self.locked();
            store.drain(self.capacity);
            store.admit(pending, self.capacity);
        }
    }

    /// The place of `model`'s version in [`AnswerStore::versions`], added the first time.
    fn version_number(&self, model: &Model) -> u32 {
        let known = |list: &[VersionName]| {
            list.iter()
                .position(|v| &*v.model == model.name() && &*v.version == model.version())
        };
        if let Some(i) = known(&self.versions.load()) {
            return i as u32;
        }
        let _writer = self
            .versions_writer
            .lock()
            .unwrap_or_else(PoisonError::into_inner);
        let current = self.versions.load_full();
        if let Some(i) = known(&current) {
            return i as u32;
        }
        let mut next = Vec::clone(&current);
        next.push(VersionName {
            model: model.name().into(),
            version: model.version().into(),
        });
        self.versions.store(Arc::new(next));
        current.len() as u32
    }

    /// The store, locked, with the inbox not yet drained.
    fn locked(&self) -> MutexGuard<'_, Store> {
        self.store.lock().unwrap_or_else(PoisonError::into_inner)
    }

    /// Drain the inbox into the locked store; returns the store.
    fn settle<'a>(&self, mut store: MutexGuard<'a, Store>) -> MutexGuard<'a, Store> {
        store.drain(self.capacity);
        store
    }

    /// Mark answer `answer_id` of model `model_name` as having `outcome`, and return it.
    pub fn claim(
        &self,
        model_name: &str,
        answer_id: &str,
        outcome: bool,
    ) -> Result<MatchedAnswer, OutcomeError> {
        let not_found = || OutcomeError::NotFound {
            model: model_name.to_string(),
            answer_id: answer_id.to_string(),
        };
        let whole_hash = self.hasher.hash_one(answer_id.as_bytes());
        let split = split_answer_id(answer_id).map(|(request_id, index)| {
            (
                request_id,
                index,
                self.hasher.hash_one(request_id.as_bytes()),
            )
        });
        let mut store = self.settle(self.locked());
        let single = store
            .position(answer_id, whole_hash)
            .filter(|&p| matches!(store.ring[p].answers, Answers::Single(_)));
        let (position, index) = match (single, split) {
            (Some(p), _) => (p, None),
            (None, Some((request_id, index, hash))) => (
                store.position(request_id, hash).ok_or_else(not_found)?,
                Some(index),
            ),
            (None, None) => return Err(not_found()),
        };
        let request = &mut store.ring[position];
        let versions = self.versions.load();
        let Some(answered_by) = versions.get(request.version as usize) else {
            return Err(not_found());
        };
        if &*answered_by.model != model_name {
            return Err(not_found());
        }
        let answer = match (&mut request.answers, index) {
            (Answers::Single(a), None) => a,
            (Answers::Batch(b), Some(i)) => b.get_mut(i).ok_or_else(not_found)?,
            _ => return Err(not_found()),
        };
        if let Some(earlier) = answer.outcome {
            return Err(OutcomeError::AlreadyReported {
                answer_id: answer_id.to_string(),
                outcome: u8::from(earlier),
            });
        }
        answer.outcome = Some(outcome);
        Ok(MatchedAnswer {
            answer_id: answer_id.to_string(),
            model: model_name.to_string(),
            version: answered_by.version.to_string(),
            probability: answer.probability,
            linear_index: answer.linear_index,
            outcome: u8::from(outcome),
        })
    }

    /// The store's size now.
    pub fn summary(&self) -> StoreSummary {
        let store = self.settle(self.locked());
        StoreSummary {
            held: store.held,
            capacity: self.capacity,
            evicted_total: store.evicted,
        }
    }
}

/// Exposes the store's size to a Prometheus registry, read when scraped.
struct StoreCollector {
    store: Arc<AnswerStore>,
    evicted: IntCounter,
    held: IntGauge,
    descs: Vec<Desc>,
}

impl StoreCollector {
    fn with_descs(mut self) -> Self {
        self.descs = self
            .evicted
            .desc()
            .into_iter()
            .chain(self.held.desc())
            .cloned()
            .collect();
        self
    }
}

impl Collector for StoreCollector {
    fn desc(&self) -> Vec<&Desc> {
        self.descs.iter().collect()
    }

    fn collect(&self) -> Vec<MetricFamily> {
        let summary = self.store.summary();
        self.held
            .set(i64::try_from(summary.held).unwrap_or(i64::MAX));
        // The store's count only grows; the counter catches up with it.
        let behind = summary.evicted_total.saturating_sub(self.evicted.get());
        self.evicted.inc_by(behind);
        self.evicted
            .collect()
            .into_iter()
            .chain(self.held.collect())
            .collect()
    }
}

/// `ID/i` → (`ID`, i), with i written in plain decimal digits (no sign, no leading zeros).
fn split_answer_id(answer_id: &str) -> Option<(&str, usize)> {
    let (request_id, index) = answer_id.rsplit_once('/')?;
    let canonical = !index.is_empty()
        && index.bytes().all(|b| b.is_ascii_digit())
        && (index == "0" || !index.starts_with('0'));
    if !canonical || request_id.is_empty() {
        return None;
    }
    Some((request_id, index.parse().ok()?))
}

/// Match an outcome to its answer and record it in the answering version's calibration window.
pub fn report_outcome(
    answers: &AnswerStore,
    calibration: &CalibrationMonitor,
    model_name: &str,
    answer_id: &str,
    outcome: bool,
) -> Result<MatchedAnswer, OutcomeError> {
    let matched = answers.claim(model_name, answer_id, outcome)?;
    calibration.record(
        &matched.model,
        &matched.version,
        matched.probability,
        outcome,
    );
    Ok(matched)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn tiny_model() -> Arc<Model> {
        let file = br#"{"format": "ogive-model", "format_version": 1, "name": "m", "version": "1",
            "outcome": {"name": "y", "meaning": "a test outcome"}, "link": "logit",
            "covariates": [{"name": "x", "kind": "continuous",
                            "training": {"min": 0, "max": 1, "mean": 0.5}}],
            "terms": [{"term": "intercept", "coefficient": 0.1}],
            "provenance": {"fitted_by": "test", "fitted_at": "1970-01-01T00:00:00Z",
                           "observations": 1}}"#;
        Arc::new(Model::from_json(file).expect("a valid model"))
    }

    #[test]
    fn the_ring_never_outgrows_its_first_allocation() {
        let registry = Registry::new();
        let store = AnswerStore::new(64, &registry).expect("store");
        let model = tiny_model();
        // (The index's own `capacity()` counts free buckets net of deleted ones, so it moves
        // without reallocating; its bound is that it never holds more than the ring.)
        let ring = store.store.lock().expect("lock").ring.capacity();
        for i in 0..5_000_u32 {
            // Fresh ids, reused ids and batches, interleaved.
            let id = if i % 3 == 0 {
                "reused".to_string()
            } else {
                format!("id-{i}")
            };
            if i % 7 == 0 {
                store.keep_batch(&id, &model, vec![StoredAnswer::new(0.5, 0.0); 5]);
            } else {
                store.keep_single(&id, &model, StoredAnswer::new(0.5, 0.0));
            }
            let s = store.store.lock().expect("lock");
            assert!(s.ring.len() <= 64 && s.held <= 64 && s.index.len() <= 64 + 64 / 4 + 1);
        }
        let s = store.store.lock().expect("lock");
        assert_eq!(s.ring.capacity(), ring);
        let held: usize = s
            .ring
            .iter()
            .filter(|r| !r.is_empty_slot())
            .map(|r| r.answers.len())
            .sum();
        assert_eq!(held, s.held);
    }

    #[test]
    fn long_ids_are_kept_whole() {
        let long = "x".repeat(128);
        assert_eq!(StoredId::new(&long).as_bytes(), long.as_bytes());
        assert_eq!(StoredId::new("abc").as_bytes(), b"abc");
        let registry = Registry::new();
        let store = AnswerStore::new(4, &registry).expect("store");
        store.keep_single(&long, &tiny_model(), StoredAnswer::new(0.25, 1.0));
        assert_eq!(
            store.claim("m", &long, true).map(|m| m.probability),
            Ok(0.25)
        );
    }

    #[test]
    fn answer_ids_split_at_the_last_slash_into_canonical_indices() {
        assert_eq!(split_answer_id("abc/3"), Some(("abc", 3)));
        assert_eq!(split_answer_id("a/b/12"), Some(("a/b", 12)));
        assert_eq!(split_answer_id("abc/0"), Some(("abc", 0)));
        assert_eq!(split_answer_id("abc/03"), None);
        assert_eq!(split_answer_id("abc/+3"), None);
        assert_eq!(split_answer_id("abc/"), None);
        assert_eq!(split_answer_id("/3"), None);
        assert_eq!(split_answer_id("abc"), None);
        assert_eq!(split_answer_id("abc/99999999999999999999999"), None);
    }
}
