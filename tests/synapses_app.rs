//! The app's synapse table (egui_kittest, no rendering): open the demo cell's table through the
//! side panel, colour by synapse count, choose an input, and check the counts against the table
//! read with a plain split (not the library's reader).
#![cfg(feature = "gui")]

use eframe::egui::Vec2;
use egui_kittest::Harness;
use egui_kittest::kittest::Queryable;
use pollard::app::files::{Dialogs, Purpose, RecentFiles};
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

/// Total site count of the state's reduced tree (one site per synapse once a table serves).
fn site_total(s: &pollard::app::state::CellState) -> u64 {
    let r = s.reduced.as_ref().expect("a reduced tree");
    r.tree
        .compartments
        .iter()
        .map(|c| c.site_count as u64)
        .sum()
}

#[test]
fn opening_a_table_re_reduces_for_its_synapses_as_the_command_does() {
    let rows = std::fs::read_to_string(table_path())
        .unwrap()
        .lines()
        .filter(|l| !l.starts_with('#') && !l.trim().is_empty())
        .count()
        - 1; // the header
    let mut app = PollardApp::new(
        Start::Demo,
        Dialogs::scripted(vec![Some(table_path())]),
        RecentFiles::in_memory(),
    );
    app.wait_idle();
    let budget = 31;
    app.state.as_mut().unwrap().set_budget(budget);
    let before = {
        let s = app.state.as_ref().unwrap();
        (
            site_total(s),
            s.reduced.as_ref().unwrap().tree.compartments.clone(),
        )
    };
    // the default sites: every dendritic point, not the table's rows
    assert_ne!(before.0, rows as u64);
    let mut h = Harness::builder()
        .with_size(Vec2::new(1500.0, 950.0))
        .with_max_steps(200)
        .build_ui_state(|ui, app: &mut PollardApp| app.show(ui), app);
    h.run_steps(2);
    h.get_by_label("Open synapse table…").click();
    h.run_steps(3);
    h.state_mut().poll();
    h.state_mut().wait_idle();
    h.run_steps(2);
    let s = h.state().state.as_ref().unwrap();
    assert!(s.synapses.is_some());
    assert_eq!(s.budget, budget);
    // every row of the table is one site of the new reduction
    assert_eq!(site_total(s), rows as u64);
    let after = &s.reduced.as_ref().unwrap().tree.compartments;
    assert_ne!(&before.1, after, "the tree did not change with the table");
    // the same tree as the library's route of `pollard reduce --synapses` (reader, snap, sites)
    let cell = Path::new(env!("CARGO_MANIFEST_DIR")).join("sample_cells/practice_pyramidal.swc");
    let m = pollard::Morphology::read(&cell).unwrap();
    let flat = pollard::cable::prepare(&m, &Default::default()).unwrap();
    let t = pollard::synapses::read_table(&table_path()).unwrap();
    let sn = pollard::synapses::snap(&t, &m, &flat, &Default::default()).unwrap();
    let opts = pollard::reduce::ReduceOptions {
        sites: sn.sites(),
        ..Default::default()
    };
    let r = pollard::reduce::Reducer::new(&flat, &s.params, &opts).unwrap();
    // polished (`timed`, the default) on the full cell's run, as the command does
    let mut want = r.tree(budget);
    let fid = pollard::fidelity::Fidelity::new(&r, &Default::default()).unwrap();
    assert!(fid.apply_capacitance_rule(&mut want).unwrap().is_some());
    assert_eq!(&want.compartments, after);
    // the saved tree carries the command's `synapses` member
    let dir = tempfile::tempdir().unwrap();
    let (mine, cli) = (dir.path().join("app.json"), dir.path().join("cli.json"));
    h.state_mut().export(Purpose::SaveJson, &mine).unwrap();
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_pollard"))
        .args(["reduce", cell.to_str().unwrap(), "-n", "31", "--synapses"])
        .arg(table_path())
        .arg("-o")
        .arg(&cli)
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let json = |p: &Path| -> serde_json::Value {
        serde_json::from_str(&std::fs::read_to_string(p).unwrap()).unwrap()
    };
    let (a, b) = (json(&mine), json(&cli));
    assert_eq!(a["synapses"]["summary"]["synapses"], 765);
    assert_eq!(a["synapses"], b["synapses"]);
    assert_eq!(a["compartments"], b["compartments"]);
}

/// `text` with the numbers in columns `cols` (split by `sep`) multiplied by 1000 (µm → nm).
fn in_nm(text: &str, cols: &[usize], sep: char, skip_header: bool) -> String {
    let mut out = String::new();
    let mut header = skip_header;
    for line in text.lines() {
        if line.starts_with('#') || line.trim().is_empty() || std::mem::take(&mut header) {
            out.push_str(line);
        } else {
            let mut f: Vec<String> = line.split(sep).map(str::to_string).collect();
            for &c in cols {
                f[c] = format!("{:?}", f[c].parse::<f64>().unwrap() * 1000.0);
            }
            out.push_str(&f.join(&sep.to_string()));
        }
        out.push('\n');
    }
    out
}

#[test]
fn a_table_in_nm_lands_where_it_does_in_um_when_the_cell_is_scaled() {
    let dir = tempfile::tempdir().unwrap();
    let cell = Path::new(env!("CARGO_MANIFEST_DIR")).join("sample_cells/practice_pyramidal.swc");
    let nm_cell = dir.path().join("nm.swc");
    let nm_table = dir.path().join("nm.synapses.csv");
    let swc = std::fs::read_to_string(&cell).unwrap();
    std::fs::write(&nm_cell, in_nm(&swc, &[2, 3, 4, 5], ' ', false)).unwrap();
    let table = std::fs::read_to_string(table_path()).unwrap();
    // columns: synapse, input, x, y, z, weight
    std::fs::write(&nm_table, in_nm(&table, &[2, 3, 4], ',', true)).unwrap();
    let open = |file: &Path, table: &Path, scale: Option<f64>| {
        let mut app = PollardApp::new_scaled(
            Start::File(file.to_path_buf()),
            Dialogs::scripted(vec![]),
            RecentFiles::in_memory(),
            scale,
        );
        app.start_options = Some(pollard::app::StartOptions {
            synapses: Some(table.to_path_buf()),
            scale,
            ..Default::default()
        });
        app.wait_idle();
        app
    };
    let um = open(&cell, &table_path(), None);
    let nm = open(&nm_cell, &nm_table, Some(0.001));
    assert_eq!(nm.error, None);
    let (a, b) = (um.state.as_ref().unwrap(), nm.state.as_ref().unwrap());
    // the scaled cell is the µm cell (to rounding)
    assert!((a.cell.extent_radius_um - b.cell.extent_radius_um).abs() < 1e-9);
    let (sa, sb) = (
        &a.synapses.as_ref().unwrap().snapped,
        &b.synapses.as_ref().unwrap().snapped,
    );
    assert_eq!(sa.synapses.len(), 765);
    assert_eq!(sb.synapses.len(), sa.synapses.len());
    for (x, y) in sa.synapses.iter().zip(&sb.synapses) {
        assert_eq!((x.point, x.node, x.input), (y.point, y.node, y.input));
        assert!((x.distance_um - y.distance_um).abs() < 1e-9, "{x:?} {y:?}");
    }
    // and the reductions serve the same synapses
    assert_eq!(site_total(a), site_total(b));
}
