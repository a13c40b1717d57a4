//! Background work: a thread per job, its progress text, its result through a channel. A panic
//! in the job is caught and comes back as an error, so the window and the current cell stay.

use eframe::egui;
use std::sync::mpsc::{Receiver, TryRecvError, channel};
use std::sync::{Arc, Mutex};
use std::time::Instant;

/// What a running job tells the window about itself.
#[derive(Clone, Default)]
pub struct Progress(Arc<Mutex<String>>);

impl Progress {
    pub fn set(&self, stage: &str) {
        if let Ok(mut s) = self.0.lock() {
            *s = stage.to_string();
        }
    }
    pub fn get(&self) -> String {
        self.0.lock().map(|s| s.clone()).unwrap_or_default()
    }
}

/// One piece of background work.
pub struct Job<T> {
    pub what: String,
    progress: Progress,
    started: Instant,
    rx: Receiver<anyhow::Result<T>>,
    done: std::cell::RefCell<Option<anyhow::Result<T>>>,
}

impl<T: Send + 'static> Job<T> {
    /// Runs `work` on a new thread; asks `ctx` for a repaint when it ends.
    pub fn spawn(
        what: String,
        ctx: Option<egui::Context>,
        work: impl FnOnce(&Progress) -> anyhow::Result<T> + Send + 'static,
    ) -> Job<T> {
        let (tx, rx) = channel();
        let progress = Progress::default();
        let p = progress.clone();
        std::thread::spawn(move || {
            let r = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| work(&p)));
            let r = match r {
                Ok(r) => r,
                Err(payload) => {
                    let msg = payload
                        .downcast_ref::<&str>()
                        .map(|s| s.to_string())
                        .or_else(|| payload.downcast_ref::<String>().cloned())
                        .unwrap_or_else(|| "unknown cause".into());
                    Err(anyhow::anyhow!("internal error (please report it): {msg}"))
                }
            };
            let _ = tx.send(r);
            if let Some(ctx) = ctx {
                ctx.request_repaint();
            }
        });
        Job {
            what,
            progress,
            started: Instant::now(),
            rx,
            done: std::cell::RefCell::new(None),
        }
    }

    /// The result, once, when the job has ended.
    pub fn try_take(&self) -> Option<anyhow::Result<T>> {
        if let Some(r) = self.done.borrow_mut().take() {
            return Some(r);
        }
        match self.rx.try_recv() {
            Ok(r) => Some(r),
            Err(TryRecvError::Empty) => None,
            Err(TryRecvError::Disconnected) => Some(Err(anyhow::anyhow!(
                "the background work stopped without a result"
            ))),
        }
    }

    /// "what: stage (n s)".
    pub fn status(&self) -> String {
        let stage = self.progress.get();
        let secs = self.started.elapsed().as_secs_f32();
        if stage.is_empty() {
            format!("{} ({secs:.0} s)", self.what)
        } else {
            format!("{}: {stage} ({secs:.0} s)", self.what)
        }
    }
}
