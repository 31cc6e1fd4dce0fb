//! The registry: which version of each model is live (and which, if any, shadows it), held
//! behind one atomic pointer so that a request sees one whole snapshot, never a mix.
//!
//! Readers call [`Registry::snapshot`] (a lock-free load) and keep the returned `Arc` for the
//! whole request; writers build a new [`Snapshot`] and swap it in. This module knows nothing of
//! HTTP.

use std::collections::BTreeMap;
use std::sync::Arc;

use arc_swap::ArcSwap;

use crate::model::Model;

pub mod announce;
pub mod gate;
pub mod lifecycle;
pub(crate) mod limits;
pub mod load;
pub mod shadow;
pub mod store;
pub mod watch;

/// One model as served: its live version, an optional shadow candidate, and the fields stored
/// candidates announce.
#[derive(Debug, Clone)]
pub struct Entry {
    /// The version `NAME/live` names, validated: the one every answer comes from.
    pub live: Arc<Model>,
    /// A candidate scored beside the live version, its answers only measured.
    pub shadow: Option<Arc<Model>>,
    /// Covariates that stored versions announce and the live version lacks: the live version
    /// accepts these fields and ignores them ([`announce`]).
    pub announced: Vec<announce::Announced>,
}

impl Entry {
    /// An entry serving `live`, with no shadow and nothing announced.
    pub fn serving(live: Arc<Model>) -> Entry {
        Entry {
            live,
            shadow: None,
            announced: Vec::new(),
        }
    }
}

/// Every served model, by name, at one instant.
#[derive(Debug, Clone, Default)]
pub struct Snapshot {
    /// Every model served, by its name (its folder under the model directory).
    pub models: BTreeMap<String, Arc<Entry>>,
}

/// The served models, swappable atomically.
#[derive(Debug, Default)]
pub struct Registry {
    current: ArcSwap<Snapshot>,
}

impl Registry {
    /// A registry serving these models as live, with no shadows (for tests and embedding).
    pub fn from_models(models: impl IntoIterator<Item = Model>) -> Registry {
        let models = models
            .into_iter()
            .map(|m| {
                let name = m.name().to_string();
                (name, Arc::new(Entry::serving(Arc::new(m))))
            })
            .collect();
        Registry {
            current: ArcSwap::from_pointee(Snapshot { models }),
        }
    }

    /// The current snapshot; hold it for the duration of one request.
    pub fn snapshot(&self) -> Arc<Snapshot> {
        self.current.load_full()
    }

    /// Replace the whole snapshot in one atomic swap.
    pub fn replace(&self, snapshot: Snapshot) {
        self.current.store(Arc::new(snapshot));
    }

    /// Make `model` the live version of its model in one atomic swap, keeping the entry's
    /// shadow and every other entry; returns the live version it replaced. Concurrent callers
    /// never lose each other's changes (read-copy-update).
    pub fn set_live(&self, model: Arc<Model>) -> Option<Arc<Model>> {
        let name = model.name().to_string();
        let before = self.current.rcu(|current| {
            let mut next = Snapshot::clone(current);
            let before = next.models.get(&name);
            let shadow = before.and_then(|e| e.shadow.clone());
            let announced = before.map(|e| e.announced.clone()).unwrap_or_default();
            next.models.insert(
                name.clone(),
                Arc::new(Entry {
                    live: Arc::clone(&model),
                    shadow,
                    announced,
                }),
            );
            next
        });
        before.models.get(&name).map(|e| Arc::clone(&e.live))
    }

    /// Set model `name`'s shadow to what `choose` returns for its current entry, keeping its
    /// live version and every other entry, in one atomic swap (read-copy-update, so a
    /// concurrent [`set_live`](Registry::set_live) is never lost; `choose` may run more than
    /// once). Returns the entry as it was, or `None`, changing nothing, when `name` is not
    /// served.
    pub fn update_shadow(
        &self,
        name: &str,
        choose: impl Fn(&Entry) -> Option<Arc<Model>>,
    ) -> Option<Arc<Entry>> {
        let before = self.current.rcu(|current| {
            let mut next = Snapshot::clone(current);
            if let Some(entry) = current.models.get(name) {
                let shadow = choose(entry);
                next.models.insert(
                    name.to_string(),
                    Arc::new(Entry {
                        shadow,
                        ..Entry::clone(entry)
                    }),
                );
            }
            next
        });
        before.models.get(name).cloned()
    }

    /// Set what stored versions of model `name` announce, keeping everything else, in one
    /// atomic swap (read-copy-update); nothing changes when `name` is not served or the list
    /// is the same.
    pub fn set_announced(&self, name: &str, announced: &[announce::Announced]) {
        self.current.rcu(|current| {
            let mut next = Snapshot::clone(current);
            if let Some(entry) = current.models.get(name) {
                if entry.announced != announced {
                    next.models.insert(
                        name.to_string(),
                        Arc::new(Entry {
                            announced: announced.to_vec(),
                            ..Entry::clone(entry)
                        }),
                    );
                }
            }
            next
        });
    }
}
