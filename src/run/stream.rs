//! The stream of run events: one place every step of a session is announced, and the
//! subscribers that react to it.
//!
//! The sequencer publishes; the journal (which persists and syncs journal events before the
//! sequencer goes on), the fitting workers (which start a fit when a spectrum is acquired) and
//! whoever shows progress subscribe. Subscribers run in the order they subscribed, on the
//! sequencer's task: one that must not slow the run (a live page) hands events on through a
//! channel that never waits.

use super::events::Event;
use super::journal::Journal;
use crate::spectrum::RawSpectrum;
use std::sync::Arc;

/// One event of a session.
#[derive(Debug, Clone)]
pub enum RunEvent {
    /// A journal event (persisted by the journal subscriber).
    Journal(Event),
    /// A pass over sites begins: this many measurements are planned (pass 0 is the first,
    /// later passes re-measure sites that came back invalid).
    Pass { pass: u32, sites: usize },
    /// A site's spectrum was acquired and journalled; fitting workers take it from here.
    Acquired {
        site: usize,
        attempt: u32,
        raw: Arc<RawSpectrum>,
    },
    /// Something worth a line for the operator (homing, reference taken, retrying…).
    Note(String),
}

/// Something that reacts to run events. An error stops the session (the journal's do).
pub trait Subscriber: Send {
    /// Called for every event, in publishing order.
    fn on_event(&mut self, event: &RunEvent) -> anyhow::Result<()>;
}

/// A closure as a subscriber that cannot fail (progress display).
pub struct Watcher<F>(pub F);

impl<F: FnMut(&RunEvent) + Send> Subscriber for Watcher<F> {
    fn on_event(&mut self, event: &RunEvent) -> anyhow::Result<()> {
        (self.0)(event);
        Ok(())
    }
}

impl Subscriber for Journal {
    fn on_event(&mut self, event: &RunEvent) -> anyhow::Result<()> {
        if let RunEvent::Journal(e) = event {
            self.append(e)?;
        }
        Ok(())
    }
}

/// The subscribers of one session.
#[derive(Default)]
pub struct EventStream {
    subscribers: Vec<Box<dyn Subscriber>>,
}

impl EventStream {
    /// A stream with no subscriber.
    pub fn new() -> EventStream {
        EventStream::default()
    }

    /// Adds a subscriber after those already there.
    pub fn subscribe(&mut self, s: impl Subscriber + 'static) {
        self.subscribers.push(Box::new(s));
    }

    /// Adds boxed subscribers (the caller's) after those already there.
    pub fn subscribe_all(&mut self, subs: Vec<Box<dyn Subscriber>>) {
        self.subscribers.extend(subs);
    }

    /// Hands `event` to every subscriber in order; the first error stops and is returned
    /// (so an event the journal could not persist goes no further).
    pub fn publish(&mut self, event: RunEvent) -> anyhow::Result<()> {
        for s in &mut self.subscribers {
            s.on_event(&event)?;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::sync::Mutex;

    #[test]
    fn subscribers_see_events_in_order_and_an_error_stops_the_rest() {
        let seen = Arc::new(Mutex::new(Vec::new()));
        let mut s = EventStream::new();
        let a = seen.clone();
        s.subscribe(Watcher(move |e: &RunEvent| {
            if let RunEvent::Note(n) = e {
                a.lock().unwrap().push(format!("a:{n}"));
            }
        }));
        struct Fails;
        impl Subscriber for Fails {
            fn on_event(&mut self, e: &RunEvent) -> anyhow::Result<()> {
                match e {
                    RunEvent::Note(n) if n == "bad" => anyhow::bail!("refused"),
                    _ => Ok(()),
                }
            }
        }
        s.subscribe(Fails);
        let b = seen.clone();
        s.subscribe(Watcher(move |e: &RunEvent| {
            if let RunEvent::Note(n) = e {
                b.lock().unwrap().push(format!("b:{n}"));
            }
        }));
        s.publish(RunEvent::Note("one".into())).unwrap();
        assert!(s.publish(RunEvent::Note("bad".into())).is_err());
        assert_eq!(*seen.lock().unwrap(), ["a:one", "b:one", "a:bad"]);
    }
}
