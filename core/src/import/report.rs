//! The import report: every decision the import took, for JSON and a one-screen summary.

use serde::Serialize;
use std::fmt::Write as _;

/// Counts of what the import did.
#[derive(Clone, Debug, Default, Serialize, PartialEq, Eq)]
pub struct Counts {
    /// Features in the pipes file.
    pub pipe_features: usize,
    /// Features in the points file.
    pub point_features: usize,
    /// Nodes of the model written.
    pub nodes: usize,
    /// Links of the model written.
    pub links: usize,
    /// Nodes made by snapping pipe ends (or shared vertices) that were not at one position.
    pub nodes_merged: usize,
    /// Pipe features cut into several links (at a point or a shared vertex).
    pub pipes_split: usize,
    /// Pipe features (or parts) dropped: duplicates, zero length, closed on themselves.
    pub pipes_dropped: usize,
    /// Dangling pipe ends within five snap distances of another pipe.
    pub near_misses: usize,
    /// Points farther than the snap distance from every pipe (not in the model).
    pub points_off_network: usize,
    /// Pipes whose length attribute differs from the drawn length by more than 2 %.
    pub length_differences: usize,
    /// Nodes that no reservoir or tank reaches through open links.
    pub unreached_nodes: usize,
}

/// A node made of pipe ends or vertices at different positions.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct Merged {
    /// The node's id.
    pub node: String,
    /// Its position.
    pub x: f64,
    /// Its position.
    pub y: f64,
    /// How many pipe vertices it joins.
    pub vertices: usize,
    /// The largest distance of a joined vertex from the node (metres for lon/lat input, the
    /// `[crs]` unit otherwise).
    pub largest_gap: f64,
}

/// A pipe feature cut into several links.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct Split {
    /// The feature's index in the pipes file.
    pub feature: usize,
    /// The feature's id.
    pub pipe: String,
    /// The nodes it was cut at, in drawn order.
    pub at: Vec<String>,
    /// The links it became, in drawn order.
    pub links: Vec<String>,
}

/// A pipe feature (or part of one) not in the model.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct Dropped {
    /// The feature's index in the pipes file.
    pub feature: usize,
    /// The feature's (or the part's) id.
    pub id: String,
    /// Why: "duplicate", "zero length" or "closed on itself".
    pub reason: &'static str,
    /// For a duplicate: the id of the feature kept.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub duplicate_of: Option<String>,
    /// For a duplicate: whether its attributes differ from the kept feature's.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub attributes_differ: Option<bool>,
}

/// A dangling pipe end near another pipe, not joined to it.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct NearMiss {
    /// The node at the dangling end.
    pub node: String,
    /// The link that ends there.
    pub link: String,
    /// The link it nearly meets.
    pub other: String,
    /// Where the end is.
    pub x: f64,
    /// Where the end is.
    pub y: f64,
    /// Where on the other link the nearest position is.
    pub other_x: f64,
    /// Where on the other link the nearest position is.
    pub other_y: f64,
    /// The gap (metres for lon/lat input, the `[crs]` unit otherwise).
    pub distance: f64,
}

/// A point not within the snap distance of any pipe.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct OffNetwork {
    /// The feature's index in the points file.
    pub feature: usize,
    /// The point's id.
    pub id: String,
    /// The model kind it would have been.
    pub kind: &'static str,
    /// Its position.
    pub x: f64,
    /// Its position.
    pub y: f64,
    /// The distance to the nearest pipe when within five snap distances.
    pub nearest_pipe_distance: Option<f64>,
}

/// A pipe whose length attribute differs from its drawn length by more than 2 %.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct LengthDifference {
    /// The feature's index in the pipes file.
    pub feature: usize,
    /// The feature's id.
    pub pipe: String,
    /// The length attribute, in the model's length unit (this is the length used).
    pub attribute: f64,
    /// The drawn length in plan, in the model's length unit.
    pub drawn: f64,
    /// (attribute − drawn) / drawn, percent.
    pub difference_percent: f64,
}

/// Where the nodes' elevations came from.
#[derive(Clone, Debug, Default, Serialize, PartialEq, Eq)]
pub struct Elevations {
    /// From a point's elevation attribute (or a reservoir's head).
    pub from_points: usize,
    /// From the Z coordinate of the line ends.
    pub from_z: usize,
    /// Interpolated along the network between the nearest nodes of known elevation.
    pub interpolated: usize,
    /// Set to `--elevation-default`.
    pub default: usize,
}

/// Everything the import decided.
#[derive(Clone, Debug, Default, Serialize, PartialEq)]
pub struct ImportReport {
    /// "lonlat" or "projected".
    pub coordinates: &'static str,
    /// The snap distance used.
    pub snap: f64,
    /// Unit of the snap distance and of every distance and position in this report: "m" for
    /// lon/lat input (positions in degrees), the `[crs]` unit otherwise.
    pub distance_unit: &'static str,
    /// The model's length unit (lengths in this report).
    pub length_unit: &'static str,
    /// The counts.
    pub counts: Counts,
    /// Nodes made of ends or vertices at different positions.
    pub merged: Vec<Merged>,
    /// Pipe features cut into several links.
    pub splits: Vec<Split>,
    /// Pipes dropped.
    pub dropped: Vec<Dropped>,
    /// Near misses.
    pub near_misses: Vec<NearMiss>,
    /// Points off the network.
    pub points_off_network: Vec<OffNetwork>,
    /// Length attributes more than 2 % off the drawn length.
    pub length_differences: Vec<LengthDifference>,
    /// Nodes no source reaches.
    pub unreached: Vec<String>,
    /// Where elevations came from.
    pub elevations: Elevations,
    /// Ids given to elements that had none: nodes at pipe ends are `N-<number>`; points and
    /// pipes without an id are counted here.
    pub generated_ids: usize,
}

impl ImportReport {
    /// A one-screen summary for the terminal.
    pub fn summary(&self) -> String {
        let c = &self.counts;
        let mut s = String::new();
        let _ = writeln!(
            s,
            "import: {} pipe features, {} point features -> {} nodes, {} links ({} coordinates, snap {} {})",
            c.pipe_features, c.point_features, c.nodes, c.links, self.coordinates, self.snap, self.distance_unit
        );
        let _ = writeln!(s, "  nodes merged        {:>7}", c.nodes_merged);
        let _ = writeln!(s, "  pipes split         {:>7}", c.pipes_split);
        let _ = writeln!(s, "  pipes dropped       {:>7}", c.pipes_dropped);
        let _ = writeln!(s, "  near misses         {:>7}", c.near_misses);
        let _ = writeln!(s, "  points off network  {:>7}", c.points_off_network);
        let _ = writeln!(s, "  lengths off by >2%  {:>7}", c.length_differences);
        let _ = writeln!(s, "  unreached nodes     {:>7}", c.unreached_nodes);
        let e = &self.elevations;
        let _ = writeln!(
            s,
            "  elevations: {} from points, {} from line Z, {} interpolated, {} default",
            e.from_points, e.from_z, e.interpolated, e.default
        );
        const SHOW: usize = 5;
        for d in self.dropped.iter().take(SHOW) {
            let _ = writeln!(
                s,
                "  dropped {} (feature {}): {}{}",
                d.id,
                d.feature,
                d.reason,
                d.duplicate_of.as_ref().map(|k| format!(" of {k}")).unwrap_or_default()
            );
        }
        for m in self.near_misses.iter().take(SHOW) {
            let _ = writeln!(
                s,
                "  near miss: {} ends {:.3} {} from {} at ({}, {})",
                m.link, m.distance, self.distance_unit, m.other, m.x, m.y
            );
        }
        for p in self.points_off_network.iter().take(SHOW) {
            let _ = writeln!(s, "  point {} ({}) is off the network at ({}, {})", p.id, p.kind, p.x, p.y);
        }
        let more = self.dropped.len().saturating_sub(SHOW)
            + self.near_misses.len().saturating_sub(SHOW)
            + self.points_off_network.len().saturating_sub(SHOW);
        if more > 0 {
            let _ = writeln!(s, "  ... {more} more in the JSON report (--report)");
        }
        s
    }
}
