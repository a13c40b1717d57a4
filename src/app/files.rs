//! File dialogs, the recent-files list and the sample cells.
//!
//! Dialogs sit behind [`Dialogs`]: the app uses the system's dialog on a background thread;
//! tests use a scripted list of answers, so no test ever opens a dialog.

use std::collections::VecDeque;
use std::path::{Path, PathBuf};
use std::sync::mpsc::{Receiver, channel};
use std::sync::{Arc, Mutex};

/// What a dialog is asked for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Purpose {
    Open,
    SaveJson,
    SaveSwc,
    SaveNeuroml,
    SaveSvg,
    SavePng,
    /// A tree of the branching lab as SWC.
    ExportLabSwc,
    OpenSynapses,
}

impl Purpose {
    fn filter(self) -> (&'static str, &'static [&'static str]) {
        match self {
            Purpose::Open => ("SWC reconstruction", &["swc", "SWC"]),
            Purpose::SaveJson => ("Reduced tree (JSON)", &["json"]),
            Purpose::SaveSwc => ("Reduced tree (SWC)", &["swc"]),
            Purpose::SaveNeuroml => ("Reduced tree (NeuroML cell)", &["nml"]),
            Purpose::SaveSvg => ("Figure (SVG)", &["svg"]),
            Purpose::SavePng => ("Figure (PNG)", &["png"]),
            Purpose::ExportLabSwc => ("SWC reconstruction", &["swc"]),
            Purpose::OpenSynapses => ("Synapse table (CSV)", &["csv", "CSV"]),
        }
    }

    fn suggested(self, base: &str) -> String {
        match self {
            Purpose::Open | Purpose::OpenSynapses => String::new(),
            Purpose::SaveJson => format!("{base}-reduced.json"),
            Purpose::SaveSwc => format!("{base}-reduced.swc"),
            Purpose::SaveNeuroml => format!("{base}-reduced.cell.nml"),
            Purpose::SaveSvg => format!("{base}-figure.svg"),
            Purpose::SavePng => format!("{base}-figure.png"),
            Purpose::ExportLabSwc => format!("{base}.swc"),
        }
    }
}

/// Where file names come from.
#[derive(Clone)]
pub enum Dialogs {
    /// The system's file dialog, run off the UI thread.
    Native,
    /// Answers given in advance (tests): each request takes the next one; none left = cancel.
    Scripted(Arc<Mutex<VecDeque<Option<PathBuf>>>>),
}

impl Dialogs {
    /// A scripted source with these answers.
    pub fn scripted(answers: Vec<Option<PathBuf>>) -> Dialogs {
        Dialogs::Scripted(Arc::new(Mutex::new(answers.into())))
    }

    /// Adds an answer to a scripted source (no effect on the native one).
    pub fn push(&self, answer: Option<PathBuf>) {
        if let Dialogs::Scripted(q) = self
            && let Ok(mut q) = q.lock()
        {
            q.push_back(answer);
        }
    }

    /// Asks for a path; the answer comes through the receiver (None = cancelled).
    pub fn ask(&self, purpose: Purpose, base_name: &str) -> Receiver<Option<PathBuf>> {
        let (tx, rx) = channel();
        match self {
            Dialogs::Scripted(q) => {
                let a = q.lock().ok().and_then(|mut q| q.pop_front()).flatten();
                let _ = tx.send(a);
            }
            Dialogs::Native => {
                let (name, exts) = purpose.filter();
                let suggested = purpose.suggested(base_name);
                std::thread::spawn(move || {
                    let d = rfd::FileDialog::new().add_filter(name, exts);
                    let a = if matches!(purpose, Purpose::Open | Purpose::OpenSynapses) {
                        d.pick_file()
                    } else {
                        d.set_file_name(suggested).save_file()
                    };
                    let _ = tx.send(a);
                });
            }
        }
        rx
    }
}

/// The last few files opened, kept in a small text file in the user's config folder.
#[derive(Debug, Clone, Default)]
pub struct RecentFiles {
    pub store: Option<PathBuf>,
    pub list: Vec<PathBuf>,
}

const RECENT_MAX: usize = 8;

impl RecentFiles {
    /// A list kept nowhere (tests).
    pub fn in_memory() -> RecentFiles {
        RecentFiles::default()
    }

    /// The list in `$XDG_CONFIG_HOME/pollard/recent-files.txt` (or `~/.config/...`).
    pub fn from_config() -> RecentFiles {
        let base = std::env::var_os("XDG_CONFIG_HOME")
            .map(PathBuf::from)
            .filter(|p| p.is_absolute())
            .or_else(|| std::env::var_os("HOME").map(|h| PathBuf::from(h).join(".config")));
        match base {
            Some(b) => RecentFiles::at(b.join("pollard").join("recent-files.txt")),
            None => RecentFiles::default(),
        }
    }

    /// The list kept in `store`.
    pub fn at(store: PathBuf) -> RecentFiles {
        let list = std::fs::read_to_string(&store)
            .map(|t| {
                t.lines()
                    .filter(|l| !l.trim().is_empty())
                    .map(PathBuf::from)
                    .take(RECENT_MAX)
                    .collect()
            })
            .unwrap_or_default();
        RecentFiles {
            store: Some(store),
            list,
        }
    }

    pub fn add(&mut self, p: &Path) {
        let p = std::fs::canonicalize(p).unwrap_or_else(|_| p.to_path_buf());
        self.list.retain(|q| q != &p);
        self.list.insert(0, p);
        self.list.truncate(RECENT_MAX);
        self.save();
    }

    pub fn clear(&mut self) {
        self.list.clear();
        self.save();
    }

    fn save(&self) {
        let Some(store) = &self.store else { return };
        if let Some(dir) = store.parent() {
            let _ = std::fs::create_dir_all(dir);
        }
        let text: String = self
            .list
            .iter()
            .map(|p| format!("{}\n", p.display()))
            .collect();
        // losing the recent list is harmless; it is not worth an error message
        let _ = crate::export::write_atomic(store, text.as_bytes(), &[]);
    }
}

/// The sample cells offered in the Samples menu: (name, SWC text).
pub fn samples() -> Vec<(String, String)> {
    crate::samples::SAMPLES
        .iter()
        .map(|s| (s.name.to_string(), s.text.to_string()))
        .collect()
}
