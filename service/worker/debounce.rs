//! When to refit: an object is due `quiet` after its last new
//! observation, or `max_delay` after the first one still waiting, whichever
//! comes first, so that a burst of files gives one fit and a steady trickle
//! still gives one every `max_delay`. Pure bookkeeping over instants, so it
//! is tested without a clock.

use std::collections::{BTreeMap, BTreeSet};
use std::time::{Duration, Instant};

use crate::store::Trigger;

#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Waiting {
    pub first: Instant,
    pub last: Instant,
    /// The strongest reason so far (manual over override over new
    /// observations), which the solution record keeps.
    pub trigger: Trigger,
}

fn rank(t: Trigger) -> u8 {
    match t {
        Trigger::NewObservations => 0,
        Trigger::Override => 1,
        Trigger::Manual => 2,
    }
}

#[derive(Debug, Clone)]
pub struct Debounce {
    quiet: Duration,
    max_delay: Duration,
    waiting: BTreeMap<String, Waiting>,
}

impl Debounce {
    pub fn new(quiet: Duration, max_delay: Duration) -> Self {
        Self {
            quiet,
            max_delay: max_delay.max(quiet),
            waiting: BTreeMap::new(),
        }
    }

    /// Something new for `object` at `now`. A manual request is due at
    /// once: the analyst asked for it.
    pub fn mark(&mut self, object: &str, now: Instant, trigger: Trigger) {
        let w = self.waiting.entry(object.to_string()).or_insert(Waiting {
            first: now,
            last: now,
            trigger,
        });
        w.last = now;
        if rank(trigger) > rank(w.trigger) {
            w.trigger = trigger;
        }
        if trigger == Trigger::Manual {
            w.first = now - self.max_delay;
        }
    }

    fn due_at(&self, w: &Waiting) -> Instant {
        (w.last + self.quiet).min(w.first + self.max_delay)
    }

    /// Objects due at `now` and not in `busy`, earliest first.
    pub fn due(&self, now: Instant, busy: &BTreeSet<String>) -> Vec<String> {
        let mut due: Vec<(Instant, &String)> = self
            .waiting
            .iter()
            .filter(|(id, _)| !busy.contains(*id))
            .map(|(id, w)| (self.due_at(w), id))
            .filter(|(at, _)| *at <= now)
            .collect();
        due.sort();
        due.into_iter().map(|(_, id)| id.clone()).collect()
    }

    /// When the next object not in `busy` falls due.
    pub fn next_due(&self, busy: &BTreeSet<String>) -> Option<Instant> {
        self.waiting
            .iter()
            .filter(|(id, _)| !busy.contains(*id))
            .map(|(_, w)| self.due_at(w))
            .min()
    }

    /// Takes an object off the list as its fit starts.
    pub fn take(&mut self, object: &str) -> Option<Waiting> {
        self.waiting.remove(object)
    }

    pub fn len(&self) -> usize {
        self.waiting.len()
    }

    pub fn is_empty(&self) -> bool {
        self.waiting.is_empty()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn s(x: u64) -> Duration {
        Duration::from_secs(x)
    }

    #[test]
    fn a_burst_gives_one_fit_after_the_quiet_period() {
        let t0 = Instant::now();
        let mut d = Debounce::new(s(20), s(600));
        let none = BTreeSet::new();
        for i in 0..200 {
            d.mark(
                "obj-a",
                t0 + Duration::from_millis(10 * i),
                Trigger::NewObservations,
            );
        }
        assert!(d.due(t0 + s(20), &none).is_empty(), "still within quiet");
        assert_eq!(d.due(t0 + s(22), &none), ["obj-a"]);
        assert_eq!(d.len(), 1);
    }

    #[test]
    fn a_steady_trickle_is_fitted_by_the_maximum_delay() {
        let t0 = Instant::now();
        let mut d = Debounce::new(s(20), s(60));
        let none = BTreeSet::new();
        // A new file every 10 s never leaves 20 s of quiet.
        for i in 0..6 {
            d.mark("obj-a", t0 + s(10 * i), Trigger::NewObservations);
        }
        assert_eq!(d.next_due(&none), Some(t0 + s(60)));
        assert_eq!(d.due(t0 + s(60), &none), ["obj-a"]);
    }

    #[test]
    fn busy_objects_wait_and_manual_requests_go_first() {
        let t0 = Instant::now();
        let mut d = Debounce::new(s(20), s(600));
        d.mark("obj-a", t0, Trigger::NewObservations);
        d.mark("obj-b", t0 + s(5), Trigger::Manual);
        let busy: BTreeSet<String> = ["obj-a".to_string()].into();
        assert_eq!(d.due(t0 + s(5), &BTreeSet::new()), ["obj-b"]);
        assert!(d.due(t0 + s(30), &busy).iter().all(|id| id != "obj-a"));
        assert_eq!(d.take("obj-b").map(|w| w.trigger), Some(Trigger::Manual));
    }
}
