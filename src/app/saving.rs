//! Saving from the cell view: the file dialogs (asked through [`super::files::Dialogs`]) and
//! their answers, the exports of the reduced tree (JSON, SWC, NeuroML) and of the figure (SVG,
//! PNG from a screenshot), each written with `export::write_atomic` and reported in the status
//! line. What is saved is made by the library (`export`, `neuroml`) and `picture`; nothing is
//! computed here.

use super::files::Purpose;
use super::{PollardApp, colour, picture, synapses};
use eframe::egui;
use std::path::{Path, PathBuf};

impl PollardApp {
    pub(super) fn ask(&mut self, purpose: Purpose) {
        if self.pending_dialog.is_some() {
            return;
        }
        let name = self
            .state
            .as_ref()
            .map(|s| s.cell.name.trim_end_matches(".swc").to_string())
            .unwrap_or_else(|| "cell".into());
        let rx = self.dialogs.ask(purpose, &name);
        self.pending_dialog = Some((purpose, rx));
        self.poll();
    }

    pub(super) fn dialog_answered(&mut self, purpose: Purpose, path: PathBuf) {
        let result = match purpose {
            Purpose::Open => {
                self.open_path(&path);
                return;
            }
            Purpose::ExportLabSwc => {
                self.lab.write_swc(&path);
                return;
            }
            Purpose::OpenSynapses => {
                if let Some(s) = &mut self.state {
                    self.synapse_panel.error = synapses::load(s, &path).err();
                }
                return;
            }
            Purpose::SaveJson | Purpose::SaveSwc | Purpose::SaveNeuroml | Purpose::SaveSvg => {
                self.export(purpose, &path)
            }
            Purpose::SavePng => {
                if let Some(ctx) = &self.ctx {
                    let (tx, rx) = std::sync::mpsc::channel();
                    let c = ctx.clone();
                    ctx.request_screenshot(move |image| {
                        let _ = tx.send(image);
                        c.request_repaint();
                    });
                    self.pending_png = Some((path, rx));
                }
                return;
            }
        };
        self.report(result, &path);
    }

    fn report(&mut self, result: anyhow::Result<()>, path: &Path) {
        match result {
            Ok(()) => {
                self.notice = Some(format!("Saved {}", path.display()));
                self.error = None;
            }
            Err(e) => self.error = Some(format!("Could not save {}: {e:#}", path.display())),
        }
    }

    /// Writes the reduced tree (JSON, SWC or NeuroML) or the figure (SVG) to `path`.
    pub fn export(&mut self, purpose: Purpose, path: &Path) -> anyhow::Result<()> {
        let s = self
            .state
            .as_ref()
            .ok_or_else(|| anyhow::anyhow!("no cell is open"))?;
        let inputs: Vec<&Path> = s.cell.path.iter().map(|p| p.as_path()).collect();
        let bytes = match purpose {
            Purpose::SaveJson | Purpose::SaveSwc | Purpose::SaveNeuroml => {
                let r = s.reduction.as_ref().ok_or_else(|| {
                    anyhow::anyhow!("there is no reduced tree yet ({})", s.reduction_note)
                })?;
                // the tree as shown once its capacitance rule is applied (a `timed` tree
                // still being polished in the background is polished here)
                let t = s.finished_tree()?;
                match purpose {
                    Purpose::SaveJson => r.export_json(&t)?,
                    Purpose::SaveSwc => r.export_swc(&t)?,
                    _ => r.export_neuroml(&t)?,
                }
                .into_bytes()
            }
            Purpose::SaveSvg => {
                let colours = colour::colours(s, &self.scale);
                picture::svg_figure(s, &self.camera, self.layout, &colours, &self.scale)
                    .into_bytes()
            }
            Purpose::SavePng | Purpose::Open | Purpose::ExportLabSwc | Purpose::OpenSynapses => {
                anyhow::bail!("not a direct export")
            }
        };
        crate::export::write_atomic(path, &bytes, &inputs)?;
        Ok(())
    }

    pub(super) fn handle_screenshot(&mut self, ui: &mut egui::Ui) {
        let Some((_, rx)) = &self.pending_png else {
            return;
        };
        let Ok(image) = rx.try_recv() else {
            return;
        };
        let Some((path, _)) = self.pending_png.take() else {
            return;
        };
        let ppp = ui.ctx().pixels_per_point();
        let inputs: Vec<PathBuf> = self
            .state
            .as_ref()
            .and_then(|s| s.cell.path.clone())
            .into_iter()
            .collect();
        let r = picture::png_of_region(&image, self.figure_rect, ppp).and_then(|bytes| {
            let ins: Vec<&Path> = inputs.iter().map(|p| p.as_path()).collect();
            crate::export::write_atomic(&path, &bytes, &ins).map_err(anyhow::Error::from)
        });
        self.report(r, &path);
    }
}
