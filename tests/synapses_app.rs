//! The app's synapse table (egui_kittest, no rendering): open the demo cell's table through the
//! side panel, colour by synapse count, choose an input, and check the counts against the table
//! read with a plain split (not the library's reader).
#![cfg(feature = "gui")]

use eframe::egui::Vec2;
use egui_kittest::Harness;
use egui_kittest::kittest::Queryable;
use pollard::app::files::{Dialogs, RecentFiles};
use pollard::app::state::ColourBy;
use pollard::app::{PollardApp, Start, synapses};
use pollard::morphology::NONE;
use std::path::Path;

fn table_path() -> std::path::PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("sample_cells/practice_pyramidal.synapses.csv")
}

/// Rows per input of the demo table (second column), by a plain split.
fn rows_of(input: &str) -> usize {
    std::fs::read_to_string(table_path())
        .unwrap()
        .lines()
        .filter(|l| !l.starts_with('#'))
        .skip(1)
        .filter(|l| l.split(',').nth(1) == Some(input))
        .count()
}

#[test]
fn opening_a_table_colours_by_count_and_an_input_marks_its_compartments() {
    let mut app = PollardApp::new(
        Start::Demo,
        Dialogs::scripted(vec![Some(table_path())]),
        RecentFiles::in_memory(),
    );
    app.wait_idle();
    let mut h = Harness::builder()
        .with_size(Vec2::new(1500.0, 950.0))
        .with_max_steps(200)
        .build_ui_state(|ui, app: &mut PollardApp| app.show(ui), app);
    h.state_mut().wait_idle();
    h.run_steps(3);
    h.get_by_label("Open synapse table…").click();
    h.run_steps(3);
    {
        let s = h.state().state.as_ref().unwrap();
        assert_eq!(h.state().synapse_panel.error, None);
        let l = s.synapses.as_ref().expect("the table is open");
        assert_eq!(l.snapped.synapses.len(), 765);
        assert_eq!(s.colour_by, ColourBy::Synapses);
        // every synapse counted once on the points and once on the compartments
        let on_points: f64 = (0..s.cell.flat.len()).map(|k| s.value_full(k)).sum();
        assert_eq!(on_points, 765.0);
        let r = s.reduced.as_ref().unwrap();
        let on_comps: f64 = (0..r.tree.len()).map(|c| s.value_comp(c)).sum();
        assert_eq!(on_comps, 765.0);
    }
    // the busiest input
    let name = {
        let s = h.state().state.as_ref().unwrap();
        let l = s.synapses.as_ref().unwrap();
        l.input_name(l.order[0].0).to_string()
    };
    let want = rows_of(&name);
    assert!(want > 10, "{name}: {want}");
    let s = h.state_mut().state.as_mut().unwrap();
    synapses::select(s, Some(&name)).unwrap();
    assert!(synapses::select(s, Some("no such input")).is_err());
    let s = h.state().state.as_ref().unwrap();
    let l = s.synapses.as_ref().unwrap();
    let r = s.reduced.as_ref().unwrap();
    let counts = l.comp_counts(s);
    assert_eq!(counts.iter().sum::<f64>(), want as f64);
    // the compartments marked are those holding the input's snapped points
    let mut expect = vec![0.0; r.tree.len()];
    for syn in l
        .snapped
        .synapses
        .iter()
        .filter(|x| l.input_name(x.input) == name)
    {
        let m = s.model.of_full[syn.node as usize];
        assert_ne!(m, NONE);
        expect[r.extras.node_comp[m as usize] as usize] += 1.0;
    }
    assert_eq!(counts, expect);
    assert!(synapses::value_label(s).contains(&name));
    h.run_steps(2); // draws the markers
}
