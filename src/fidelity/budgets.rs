//! Fidelity against the budget: the same report for several budgets of one reduction, so a user
//! can pick the smallest tree that answers like the cell well enough for the work at hand.
//!
//! Each budget's tree is finished by the reducer's capacitance rule (for `timed`: served and
//! polished on this fidelity's full-cell run) and judged by [`Fidelity::report`]; the full cell
//! is simulated once, by [`Fidelity::new`], whatever the number of budgets.
//!
//! What this does not do: choose a budget for the user, or keep the trees (`pollard reduce`
//! writes the one chosen).

use super::{Fidelity, FidelityError, FidelityReport, PolishSummary};
use crate::Morphology;
use crate::reduce::Reducer;
use rayon::prelude::*;

/// One budget's row of a sweep.
#[derive(Debug, Clone, serde::Serialize)]
pub struct BudgetFidelity {
    /// The budget asked for, and the compartments of the tree built for it (odd, at most the
    /// cell's maximum).
    pub requested: usize,
    pub compartments: usize,
    /// The tree's slowest time constant (ms).
    pub slowest_time_constant_ms: f64,
    /// What the `timed` rule did (absent for the other rules).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub polish: Option<PolishSummary>,
    pub report: FidelityReport,
}

/// The budgets a sweep takes when none are given: 1, 3, 7, 15, … (2^k − 1) below the cell's
/// maximum, then the maximum itself.
pub fn default_budgets(max_compartments: usize) -> Vec<usize> {
    let mut b: Vec<usize> = (1..usize::BITS)
        .map(|k| (1usize << k) - 1)
        .take_while(|&b| b < max_compartments)
        .collect();
    b.push(max_compartments.max(1));
    b
}

impl Fidelity {
    /// The report at every budget of `budgets` (the reducer's effective budget of each; a budget
    /// that gives the same tree as an earlier one is kept once), ascending by compartments.
    /// `reducer` must be the one this fidelity was made from (its sites), as for
    /// [`Fidelity::report`].
    pub fn budget_sweep(
        &self,
        reducer: &Reducer,
        budgets: &[usize],
        m: Option<&Morphology>,
    ) -> Result<Vec<BudgetFidelity>, FidelityError> {
        let mut todo: Vec<(usize, usize)> = budgets
            .iter()
            .map(|&b| (reducer.effective_budget(b), b))
            .collect();
        todo.sort_unstable();
        todo.dedup_by_key(|t| t.0);
        todo.into_par_iter()
            .map(|(_, requested)| {
                let mut tree = reducer.tree(requested);
                let polish = self.apply_capacitance_rule(&mut tree)?;
                Ok(BudgetFidelity {
                    requested,
                    compartments: tree.len(),
                    slowest_time_constant_ms: tree.slowest_time_constant_ms(),
                    polish,
                    report: self.report(&tree, m)?,
                })
            })
            .collect()
    }
}

/// A sweep as CSV: one row per budget (errors in Np unless named otherwise; time-to-peak errors
/// as fractions; polish steps and sites moved 0 for the rules without a polish).
pub fn budgets_csv(rows: &[BudgetFidelity]) -> String {
    let mut s = String::from(
        "compartments,requested,attenuation_to_soma_error_median_np,attenuation_to_soma_error_p95_np,attenuation_from_soma_error_p95_np,epsp_peak_error_median_np,epsp_peak_error_p95_np,time_to_peak_error_median,time_to_peak_error_p95,soma_epsp_peak_error_np,slowest_time_constant_ms,polish_steps,sites_moved\n",
    );
    for r in rows {
        let f = &r.report;
        s.push_str(&format!(
            "{},{},{:?},{:?},{:?},{:?},{:?},{:?},{:?},{:?},{:?},{},{}\n",
            r.compartments,
            r.requested,
            f.ln_attenuation_to_soma_error_np.median,
            f.ln_attenuation_to_soma_error_np.p95,
            f.ln_attenuation_from_soma_error_np.p95,
            f.epsp_peak_error_np.median,
            f.epsp_peak_error_np.p95,
            f.time_to_peak_error.median,
            f.time_to_peak_error.p95,
            f.soma_epsp_peak_error_np,
            r.slowest_time_constant_ms,
            r.polish.map_or(0, |p| p.steps),
            r.polish.map_or(0, |p| p.sites_moved),
        ));
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn default_budgets_double_up_to_the_maximum() {
        assert_eq!(default_budgets(1), vec![1]);
        assert_eq!(default_budgets(7), vec![1, 3, 7]);
        assert_eq!(default_budgets(37), vec![1, 3, 7, 15, 31, 37]);
    }

    #[test]
    fn a_sweep_row_is_the_report_of_that_budgets_tree() {
        // 16 rounds down to 15, the same tree: kept once. Reference: each tree built and judged
        // on its own, as `pollard fidelity -n` does
        let (red, fid) = crate::fidelity::demo_reduction();
        let rows = fid.budget_sweep(&red, &[16, 7, 15, 3], None).unwrap();
        let got: Vec<(usize, usize)> = rows.iter().map(|r| (r.compartments, r.requested)).collect();
        assert_eq!(got, vec![(3, 3), (7, 7), (15, 15)]);
        for r in &rows {
            let mut tree = red.tree(r.requested);
            fid.apply_capacitance_rule(&mut tree).unwrap();
            let alone = fid.report(&tree, None).unwrap();
            assert_eq!(r.report.epsp_peak_error_np, alone.epsp_peak_error_np);
            assert_eq!(r.report.time_to_peak_error, alone.time_to_peak_error);
            assert_eq!(r.slowest_time_constant_ms, tree.slowest_time_constant_ms());
        }
        let csv = budgets_csv(&rows);
        assert_eq!(csv.lines().count(), 1 + rows.len());
        assert!(csv.lines().nth(1).unwrap().starts_with("3,3,"));
    }
}
