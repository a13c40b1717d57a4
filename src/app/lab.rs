//! The branching lab: parametric trees for teaching (owned by the lab work; a stub for now).

use crate::Morphology;

/// The lab view: owns its state, draws itself with `ui()`.
#[derive(Default)]
pub struct LabView {
    send: Option<(String, Morphology)>,
}

impl LabView {
    pub fn new() -> Self {
        Self::default()
    }

    /// Draws the lab.
    pub fn ui(&mut self, ui: &mut eframe::egui::Ui) {
        ui.label("The branching lab is coming.");
    }

    /// A tree the user asked to open in the main view ("Send to main view"), once.
    pub fn take_send_to_main(&mut self) -> Option<(String, Morphology)> {
        self.send.take()
    }
}
