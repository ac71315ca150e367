//! Evaluating criteria on a solved scenario: one [`CheckResult`] per criterion, worst first.

use super::criteria::{Criteria, Quantity};
use crate::error::Element;
use crate::model::{LinkKind, Model, NodeKind};
use crate::solve::Solution;
use crate::warning::Warning;

/// One element that breaks a criterion.
#[derive(Clone, Debug, PartialEq)]
pub struct Finding {
    /// The element.
    pub element: Element,
    /// The value found, SI (NaN when the criterion has no value, e.g. a warning).
    pub value: f64,
    /// The limit it breaks, SI (NaN when there is none).
    pub limit: f64,
    /// How far beyond the limit, SI of the same quantity; what "worst" sorts by.
    pub excess: f64,
    /// Words for findings that are not a value against a limit.
    pub detail: Option<String>,
}

impl Finding {
    /// A value of `element` beyond `limit` by `excess`.
    pub(crate) fn over(element: Element, value: f64, limit: f64, excess: f64) -> Self {
        Finding { element, value, limit, excess, detail: None }
    }
}

/// The outcome of one criterion in one scenario.
#[derive(Clone, Debug, PartialEq)]
pub struct CheckResult {
    /// The criterion's name, as the key in the criteria table (`min_pressure`,
    /// `groups.<name>.min_pressure`, `warnings.<code>`).
    pub name: String,
    /// What the values measure.
    pub quantity: Quantity,
    /// The limit, SI (NaN for criteria without one).
    pub limit: f64,
    /// How many elements were checked.
    pub checked: usize,
    /// How many break the criterion.
    pub failures: usize,
    /// The worst findings, worst first (at most the number asked for).
    pub worst: Vec<Finding>,
}

impl CheckResult {
    /// Whether the criterion holds.
    pub fn passed(&self) -> bool {
        self.failures == 0
    }

    pub(crate) fn new(name: impl Into<String>, quantity: Quantity, limit: f64) -> Self {
        CheckResult { name: name.into(), quantity, limit, checked: 0, failures: 0, worst: Vec::new() }
    }

    /// Counts a finding and keeps it when it is among the `keep` worst.
    pub(crate) fn add(&mut self, finding: Finding, keep: usize) {
        self.failures += 1;
        if keep == 0 {
            return;
        }
        let at = self.worst.partition_point(|f| f.excess >= finding.excess);
        if at < keep {
            self.worst.insert(at, finding);
            self.worst.truncate(keep);
        }
    }
}

/// The nodes the criteria read (and the pumps), found once per model: a sweep evaluates
/// thousands of solutions of one model, and reading every node's record for each of them cost
/// more than the checks.
#[derive(Clone, Debug, Default)]
pub struct NodeIndex {
    /// The junctions, in the model's order.
    pub(crate) junctions: Vec<u32>,
    /// The junctions with a demand above zero, in the model's order.
    pub(crate) demanding: Vec<u32>,
    /// The pump links, in the model's order (the only links that shut off against too high a
    /// head: what the check that demands are delivered looks for).
    pub(crate) pumps: Vec<u32>,
}

impl NodeIndex {
    /// The index of `model`'s nodes.
    pub fn new(model: &Model) -> Self {
        let mut index = NodeIndex::default();
        for (i, n) in model.nodes().iter().enumerate() {
            if matches!(n.kind, NodeKind::Junction { .. }) {
                index.junctions.push(i as u32);
                if n.demand() > 0.0 {
                    index.demanding.push(i as u32);
                }
            }
        }
        for (k, l) in model.links().iter().enumerate() {
            if matches!(l.kind, LinkKind::Pump(_)) {
                index.pumps.push(k as u32);
            }
        }
        index
    }
}

/// The pressure limits that apply to a junction: its groups' where they set the key, else global;
/// their results pushed to `out`.
fn pressure_checks(
    out: &mut Vec<CheckResult>,
    criteria: &Criteria,
    model: &Model,
    index: &NodeIndex,
    solution: &Solution,
    keep: usize,
) {
    if criteria.groups.is_empty() {
        let (mut global_min, mut global_max) = global_pressure_results(criteria);
        global_pressure_checks([global_min.as_mut(), global_max.as_mut()], model, index, solution, keep);
        out.extend(global_min.into_iter().chain(global_max));
        return;
    }
    pressure_checks_by_junction(out, criteria, model, index, solution, keep);
}

/// The results of the global pressure limits `(min, max)`, none checked yet.
fn global_pressure_results(criteria: &Criteria) -> (Option<CheckResult>, Option<CheckResult>) {
    (
        criteria.min_pressure.map(|l| CheckResult::new("min_pressure", Quantity::Pressure, l)),
        criteria.max_pressure.map(|l| CheckResult::new("max_pressure", Quantity::Pressure, l)),
    )
}

/// [`pressure_checks`] junction by junction, each junction's groups looked up (with groups or
/// without).
fn pressure_checks_by_junction(
    out: &mut Vec<CheckResult>,
    criteria: &Criteria,
    model: &Model,
    index: &NodeIndex,
    solution: &Solution,
    keep: usize,
) {
    let (mut global_min, mut global_max) = global_pressure_results(criteria);
    let mut groups: Vec<(Option<CheckResult>, Option<CheckResult>)> = criteria
        .groups
        .iter()
        .map(|g| {
            (
                g.min_pressure
                    .map(|l| CheckResult::new(format!("groups.{}.min_pressure", g.name), Quantity::Pressure, l)),
                g.max_pressure
                    .map(|l| CheckResult::new(format!("groups.{}.max_pressure", g.name), Quantity::Pressure, l)),
            )
        })
        .collect();
    let nodes = model.nodes();
    for &i in &index.junctions {
        let (i, node) = (i as usize, &nodes[i as usize]);
        let p = solution.pressure[i];
        // Disconnected junctions have no pressure; `all_demands_supplied` reports them.
        let connected = solution.connected[i] && p.is_finite();
        let (mut min_by_group, mut max_by_group) = (false, false);
        for (g, (lo, hi)) in criteria.groups.iter().zip(groups.iter_mut()) {
            if !g.selects(&node.id, node.zone.as_deref()) {
                continue;
            }
            for (check, is_min) in [(lo.as_mut(), true), (hi.as_mut(), false)] {
                let Some(c) = check else { continue };
                if is_min {
                    min_by_group = true;
                } else {
                    max_by_group = true;
                }
                if connected {
                    check_pressure(c, &node.id, p, is_min, keep);
                }
            }
        }
        if !connected {
            continue;
        }
        if let Some(c) = global_min.as_mut().filter(|_| !min_by_group) {
            check_pressure(c, &node.id, p, true, keep);
        }
        if let Some(c) = global_max.as_mut().filter(|_| !max_by_group) {
            check_pressure(c, &node.id, p, false, keep);
        }
    }
    out.extend(global_min.into_iter().chain(global_max));
    for (lo, hi) in groups {
        out.extend(lo);
        out.extend(hi);
    }
}

/// `values`, one per link, where the solution carries them: a sweep's closures carry only the
/// link results its criteria read (see [`crate::solve::Outputs`]), and a criterion that reads
/// one left out is a broken contract inside the crate, never a value to judge (see
/// `analysis::outputs_read`).
fn computed<'a>(values: &'a [f64], links: usize, what: &str) -> &'a [f64] {
    assert_eq!(values.len(), links, "the solution carries no {what}: they were not asked of the sweep");
    values
}

/// The global pressure limits `[min, max]` where no group sets one of its own: the same counts
/// and findings as the general pass, in one plain pass that counts the junctions checked apart
/// and makes findings only for a pressure beyond a limit (a sweep runs this pass over
/// every junction of every closure; the general one, with its groups and `Option`s per
/// junction, took some 4 % of a sweep's time on the generated network of 10,000 junctions).
fn global_pressure_checks(
    [min, max]: [Option<&mut CheckResult>; 2],
    model: &Model,
    index: &NodeIndex,
    solution: &Solution,
    keep: usize,
) {
    let (low, high) =
        (min.as_ref().map_or(f64::NEG_INFINITY, |c| c.limit), max.as_ref().map_or(f64::INFINITY, |c| c.limit));
    let (pressure, connected, nodes) = (&solution.pressure, &solution.connected, model.nodes());
    let mut checked = 0;
    let mut beyond = Vec::new();
    for &i in &index.junctions {
        let i = i as usize;
        let p = pressure[i];
        // Disconnected junctions have no pressure; `all_demands_supplied` reports them.
        if connected[i] && p.is_finite() {
            checked += 1;
            if p < low || p > high {
                beyond.push(i);
            }
        }
    }
    for (c, is_min) in [(min, true), (max, false)] {
        let Some(c) = c else { continue };
        c.checked += checked;
        for &i in &beyond {
            pressure_finding(c, &nodes[i].id, pressure[i], is_min, keep);
        }
    }
}

/// Counts junction `id`'s pressure `p` against `c` and adds a finding where it fails. `id` is
/// read only then: a sweep checks every junction of thousands of solutions, and reading each
/// junction's id (its record) for the ones that pass cost more than the check.
#[inline]
fn check_pressure(c: &mut CheckResult, id: &crate::model::Id, p: f64, is_min: bool, keep: usize) {
    c.checked += 1;
    pressure_finding(c, id, p, is_min, keep);
}

/// The finding of junction `id`'s pressure `p` against `c` where it fails (not counted).
#[inline]
fn pressure_finding(c: &mut CheckResult, id: &crate::model::Id, p: f64, is_min: bool, keep: usize) {
    let excess = if is_min { c.limit - p } else { p - c.limit };
    if excess > 0.0 {
        c.add(Finding::over(Element::Node(id.as_str().to_owned()), p, c.limit, excess), keep);
    }
}

/// Evaluates every criterion but `must_converge` on a solved scenario. `keep` is how many of the
/// worst findings each result lists (all are counted).
pub fn evaluate(criteria: &Criteria, model: &Model, solution: &Solution, keep: usize) -> Vec<CheckResult> {
    evaluate_indexed(criteria, model, &NodeIndex::new(model), solution, keep)
}

/// [`evaluate()`] with the index of `model`'s nodes made once (a sweep's many solutions).
pub fn evaluate_indexed(
    criteria: &Criteria,
    model: &Model,
    index: &NodeIndex,
    solution: &Solution,
    keep: usize,
) -> Vec<CheckResult> {
    let nodes = model.nodes();
    let links = model.links();
    let mut out = Vec::new();
    if criteria.all_demands_supplied {
        let mut c = CheckResult::new("all_demands_supplied", Quantity::Flow, 0.0);
        for &i in &index.demanding {
            let (i, n) = (i as usize, &nodes[i as usize]);
            c.checked += 1;
            if !solution.connected[i] {
                let detail = Some("cut off from every reservoir and tank; its demand is not supplied".to_owned());
                let finding = Finding {
                    element: Element::Node(n.id.to_string()),
                    value: n.demand(),
                    limit: 0.0,
                    excess: n.demand(),
                    detail,
                };
                c.add(finding, keep);
            }
        }
        out.push(c);
    }
    pressure_checks(&mut out, criteria, model, index, solution, keep);
    if let Some(limit) = criteria.max_velocity {
        let mut c = CheckResult::new("max_velocity", Quantity::Velocity, limit);
        let velocity = computed(&solution.velocity, links.len(), "velocities");
        for (k, l) in links.iter().enumerate() {
            if matches!(l.kind, LinkKind::Pump(_)) || !solution.link_state[k].carries_flow() {
                continue;
            }
            c.checked += 1;
            let v = velocity[k].abs();
            if v > limit {
                c.add(Finding::over(Element::Link(l.id.to_string()), v, limit, v - limit), keep);
            }
        }
        out.push(c);
    }
    if let Some(limit) = criteria.max_headloss {
        let mut c = CheckResult::new("max_headloss", Quantity::Gradient, limit);
        let headloss = computed(&solution.headloss, links.len(), "head differences");
        for (k, l) in links.iter().enumerate() {
            let Some(p) = l.as_pipe() else { continue };
            if !solution.link_state[k].carries_flow() || !headloss[k].is_finite() {
                continue;
            }
            c.checked += 1;
            let g = headloss[k] / p.length;
            if g > limit {
                c.add(Finding::over(Element::Link(l.id.to_string()), g, limit, g - limit), keep);
            }
        }
        out.push(c);
    }
    if !criteria.source_capacity.is_empty() || criteria.min_supply_margin.is_some() {
        let mut c = CheckResult::new("min_supply_margin", Quantity::Flow, f64::NAN);
        computed(&solution.flow, links.len(), "flows");
        for &(i, capacity) in &criteria.source_capacity {
            c.checked += 1;
            let allowed = criteria.min_supply_margin.map_or(capacity, |m| m.allowed_supply(capacity));
            let supply = solution.net_outflow(model, i);
            if supply > allowed {
                c.add(Finding::over(Element::Node(nodes[i].id.to_string()), supply, allowed, supply - allowed), keep);
            }
        }
        out.push(c);
    }
    if let Some(share) = criteria.min_delivered {
        // Per junction asking for water, and in total; values in percent of the demand asked.
        let limit = 100.0 * share;
        let mut c = CheckResult::new("min_delivered", Quantity::Number, limit);
        let (mut asked, mut got) = (0.0, 0.0);
        for (i, n) in nodes.iter().enumerate() {
            let d = solution.demand[i];
            if !matches!(n.kind, NodeKind::Junction { .. }) || d <= 0.0 {
                continue;
            }
            c.checked += 1;
            let q = solution.delivered(i);
            asked += d;
            got += q;
            let percent = 100.0 * q / d;
            if percent < limit {
                c.add(Finding::over(Element::Node(n.id.to_string()), percent, limit, limit - percent), keep);
            }
        }
        let mut total = CheckResult::new("min_delivered.total", Quantity::Number, limit);
        if asked > 0.0 {
            total.checked = 1;
            let percent = 100.0 * got / asked;
            if percent < limit {
                let element = Element::Table(model.title.clone().unwrap_or_else(|| "network".into()));
                let mut finding = Finding::over(element, percent, limit, limit - percent);
                finding.detail = Some(format!("the network delivers {percent:.2} % of the demand asked"));
                total.add(finding, keep);
            }
        }
        out.push(c);
        out.push(total);
    }
    if let Some(limit) = criteria.min_tank_reserve {
        let mut c = CheckResult::new("min_tank_reserve", Quantity::Length, limit);
        for n in nodes {
            let NodeKind::Tank(t) = &n.kind else { continue };
            c.checked += 1;
            let reserve = t.level - t.min_level;
            if reserve < limit {
                c.add(Finding::over(Element::Node(n.id.to_string()), reserve, limit, limit - reserve), keep);
            }
        }
        out.push(c);
    }
    out
}

/// The warnings the criteria turn into failures, one result per code listed.
pub fn warning_checks(criteria: &Criteria, warnings: &[Warning], keep: usize) -> Vec<CheckResult> {
    criteria
        .fail_on_warnings
        .iter()
        .map(|&kind| {
            let mut c = CheckResult::new(format!("warnings.{}", kind.code()), Quantity::Number, f64::NAN);
            // The model's warnings, each about one element.
            let of_kind = warnings.iter().filter(|w| w.model_kind() == Some(kind));
            for (w, element) in of_kind.filter_map(|w| Some((w, w.element.clone()?))) {
                let finding =
                    Finding { element, value: f64::NAN, limit: f64::NAN, excess: 0.0, detail: Some(w.message.clone()) };
                c.add(finding, keep);
            }
            c.checked = c.failures;
            c
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::generate::{generate, NetworkSpec};

    /// The one-pass global pressure checks count and find what the junction-by-junction pass
    /// does, findings in the same order, with limits that some junctions of a generated network
    /// (invented: see `crate::generate`) fail on each side, a junction cut off (no pressure), and
    /// every finding kept or only the worst two.
    #[test]
    fn the_global_pressure_checks_equal_the_pass_by_junction() {
        let mut m = generate(&NetworkSpec::new(300, 8)).unwrap();
        let cut =
            m.links().iter().position(|l| m.links().iter().filter(|o| o.to == l.to || o.from == l.to).count() == 1);
        if let Some(k) = cut {
            m.set_status(k, crate::model::LinkStatus::Closed).unwrap();
        }
        let solution = crate::solve::solve(&m).unwrap();
        assert!(solution.connected.iter().any(|&c| !c), "a junction cut off");
        let index = NodeIndex::new(&m);
        let mut p: Vec<f64> =
            index.junctions.iter().map(|&i| solution.pressure[i as usize]).filter(|p| p.is_finite()).collect();
        p.sort_by(f64::total_cmp);
        let (low, high) = (p[p.len() / 10], p[p.len() * 9 / 10]);
        for (min, max) in [(Some(low), Some(high)), (Some(low), None), (None, Some(high))] {
            let criteria = Criteria { min_pressure: min, max_pressure: max, ..Criteria::default() };
            for keep in [usize::MAX, 2] {
                let (mut one_pass, mut by_junction) = (Vec::new(), Vec::new());
                pressure_checks(&mut one_pass, &criteria, &m, &index, &solution, keep);
                pressure_checks_by_junction(&mut by_junction, &criteria, &m, &index, &solution, keep);
                assert_eq!(one_pass, by_junction);
                assert!(one_pass.iter().all(|c| c.failures > 0 && c.checked > 200), "{one_pass:?}");
            }
        }
    }
}
