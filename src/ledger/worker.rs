//! A [`Store`] on its own thread, for a front end that must never wait on the disk: a change
//! shows in [`BackgroundStore::ledger`] the moment it is made, the thread saves it (changes
//! that arrive together are saved together), and [`BackgroundStore::poll`] takes the thread's
//! news. While a save keeps failing the thread tries again every few seconds, so saving
//! resumes by itself once the disk has room or the folder is writable again.

use std::collections::VecDeque;
use std::sync::mpsc::{Receiver, RecvTimeoutError, Sender, channel};
use std::thread::JoinHandle;
use std::time::Duration;

use anyhow::Result;

use super::{Change, Ledger, Store, Unsaved};

/// How often the thread tries again while a save is failing.
const RETRY_EVERY: Duration = Duration::from_secs(3);

/// Where the curator's changes are.
#[derive(Clone, Debug, PartialEq)]
pub enum Status {
    /// Everything is on disk.
    Saved,
    /// Changes are on their way to the disk.
    Saving { changes: usize },
    /// The last save failed: the changes are kept in memory and tried again.
    Unsaved(Unsaved),
}

enum Message {
    Change(u64, Change),
    Retry,
    Reload,
    Close,
}

struct Report {
    through: u64,
    ledger: Ledger,
    unsaved: Option<Unsaved>,
}

/// A ledger saved on a thread of its own.
pub struct BackgroundStore {
    view: Ledger,
    unconfirmed: VecDeque<(u64, Change)>,
    sent: u64,
    unsaved: Option<Unsaved>,
    tx: Sender<Message>,
    rx: Receiver<Report>,
    thread: Option<JoinHandle<()>>,
}

impl BackgroundStore {
    /// Moves `store` onto a thread. `wake` is called (on that thread) after each save or failed
    /// save, e.g. to ask the window for a new frame.
    pub fn spawn(store: Store, wake: impl Fn() + Send + 'static) -> BackgroundStore {
        let view = store.ledger().clone();
        let (tx, inbox) = channel();
        let (outbox, rx) = channel();
        let thread = std::thread::Builder::new()
            .name("ledger".into())
            .spawn(move || run(store, inbox, outbox, wake))
            .expect("start the ledger's thread");
        BackgroundStore { view, unconfirmed: VecDeque::new(), sent: 0, unsaved: None, tx, rx, thread: Some(thread) }
    }

    /// The ledger as the user sees it, every change included.
    pub fn ledger(&self) -> &Ledger {
        &self.view
    }

    /// Makes a change: at once in [`BackgroundStore::ledger`], and on disk soon. An error only
    /// for a change that is not valid (then nothing changed).
    pub fn change(&mut self, change: Change) -> Result<()> {
        change.check()?;
        self.view.apply(&change);
        self.sent += 1;
        self.unconfirmed.push_back((self.sent, change.clone()));
        // A thread that has gone (it cannot, short of a panic) leaves the change unconfirmed,
        // which `status` then reports as not saved.
        self.tx.send(Message::Change(self.sent, change)).ok();
        Ok(())
    }

    /// Asks the thread to try saving again now.
    pub fn retry(&self) {
        self.tx.send(Message::Retry).ok();
    }

    /// Asks the thread to reread the file (to show what other writers saved).
    pub fn reload(&self) {
        self.tx.send(Message::Reload).ok();
    }

    /// Takes the thread's news; `true` when there was any (the view may have changed).
    pub fn poll(&mut self) -> bool {
        let mut last = None;
        while let Ok(r) = self.rx.try_recv() {
            last = Some(r);
        }
        let Some(r) = last else { return false };
        self.take(r);
        true
    }

    fn take(&mut self, r: Report) {
        while self.unconfirmed.front().is_some_and(|(n, _)| *n <= r.through) {
            self.unconfirmed.pop_front();
        }
        self.view = r.ledger;
        for (_, c) in &self.unconfirmed {
            self.view.apply(c);
        }
        self.unsaved = r.unsaved;
    }

    /// Where the changes are.
    pub fn status(&self) -> Status {
        match &self.unsaved {
            Some(u) => Status::Unsaved(Unsaved { changes: u.changes + self.unconfirmed.len(), ..u.clone() }),
            None if self.unconfirmed.is_empty() => Status::Saved,
            None => Status::Saving { changes: self.unconfirmed.len() },
        }
    }

    /// Waits for the last save and stops the thread: what is still not saved, if anything, so
    /// the front end can tell the user before it goes. Call it when the window closes (a
    /// process that ends right after dropping the store may end before the last save).
    pub fn close(mut self) -> Option<Unsaved> {
        self.tx.send(Message::Close).ok();
        if let Some(t) = self.thread.take() {
            t.join().ok();
        }
        while let Ok(r) = self.rx.try_recv() {
            self.take(r);
        }
        match self.status() {
            Status::Saved => None,
            Status::Unsaved(u) => Some(u),
            Status::Saving { .. } => unreachable!("the thread reports every change before it stops"),
        }
    }
}

impl Drop for BackgroundStore {
    fn drop(&mut self) {
        // The thread saves what it has, then stops; dropping does not wait for it.
        self.tx.send(Message::Close).ok();
    }
}

fn run(mut store: Store, inbox: Receiver<Message>, outbox: Sender<Report>, wake: impl Fn()) {
    let mut through = 0;
    loop {
        let first = if store.unsaved_changes() > 0 {
            match inbox.recv_timeout(RETRY_EVERY) {
                Ok(m) => Some(m),
                Err(RecvTimeoutError::Timeout) => None,
                Err(RecvTimeoutError::Disconnected) => Some(Message::Close),
            }
        } else {
            Some(inbox.recv().unwrap_or(Message::Close))
        };
        let mut close = false;
        let mut reload = false;
        for m in first.into_iter().chain(std::iter::from_fn(|| inbox.try_recv().ok())) {
            match m {
                Message::Change(n, c) => {
                    // Checked by the sender; a change that fails here is not valid anyway.
                    store.apply(c).ok();
                    through = n;
                }
                Message::Retry => {}
                Message::Reload => reload = true,
                Message::Close => close = true,
            }
        }
        store.save().ok();
        if reload {
            store.reload().ok();
        }
        let report = Report { through, ledger: store.ledger().clone(), unsaved: store.pending() };
        // A front end that is gone has no one to tell; it sent Close first (see Drop).
        if outbox.send(report).is_err() || close {
            return;
        }
        wake();
    }
}
