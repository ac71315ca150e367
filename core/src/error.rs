//! Error types of the library.
//!
//! Policy: everything a user or a file can cause returns a `Result` with one of these errors; a
//! panic means a broken internal contract (a bug) and nothing else. Every error carries what a
//! user needs to find the problem: the file, the element id, the key, and for syntax errors the
//! line and column.

use std::fmt;

/// The element of a model an error is about.
#[derive(Clone, Debug, PartialEq, Eq, Hash)]
#[non_exhaustive]
pub enum Element {
    /// A node, by id.
    Node(String),
    /// A link, by id.
    Link(String),
    /// The n-th entry (0-based) of `nodes`, when it has no usable id.
    NodeEntry(usize),
    /// The n-th entry (0-based) of `links`, when it has no usable id.
    LinkEntry(usize),
    /// A top-level table such as `units` or `hydraulics`.
    Table(String),
    /// A pattern, by id.
    Pattern(String),
    /// A control, by id.
    Control(String),
    /// The n-th entry (0-based) of an array of tables such as `patterns`, when it has no usable id.
    Entry(String, usize),
    /// A feature of a GeoJSON file being imported: its 0-based index in `features` and its id,
    /// when it has one.
    Feature {
        /// Index in the file's `features` array, 0-based.
        index: usize,
        /// The feature's id (the mapped id attribute, or else its `id` member).
        id: Option<String>,
    },
    /// A water-quality constituent (`[[quality]]`), by id.
    Constituent(String),
}

impl fmt::Display for Element {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Element::Node(id) => write!(f, "node '{}'", printable(id)),
            Element::Link(id) => write!(f, "link '{}'", printable(id)),
            Element::NodeEntry(i) => write!(f, "nodes entry #{}", i + 1),
            Element::LinkEntry(i) => write!(f, "links entry #{}", i + 1),
            Element::Table(name) => write!(f, "[{name}]"),
            Element::Pattern(id) => write!(f, "pattern '{}'", printable(id)),
            Element::Control(id) => write!(f, "control '{}'", printable(id)),
            Element::Entry(table, i) => write!(f, "{table} entry #{}", i + 1),
            Element::Feature { index, id: Some(id) } => {
                write!(f, "feature #{} (features[{index}], id '{}')", index + 1, printable(id))
            }
            Element::Feature { index, id: None } => write!(f, "feature #{} (features[{index}], no id)", index + 1),
            Element::Constituent(id) => write!(f, "quality '{}'", printable(id)),
        }
    }
}

/// Escapes control characters so that an id can be shown safely on one line.
pub fn printable(text: &str) -> String {
    text.chars().flat_map(char::escape_debug).collect::<String>().replace("\\'", "'")
}

/// A model that cannot be read or is not valid.
#[derive(Clone, Debug, PartialEq)]
#[non_exhaustive]
pub struct ModelError {
    /// The file (or other source) the model came from, when known.
    pub file: Option<String>,
    /// Line and column (1-based) for syntax errors.
    pub position: Option<(usize, usize)>,
    /// The element concerned.
    pub element: Option<Element>,
    /// The key concerned.
    pub key: Option<String>,
    /// What is wrong, and where it helps, what would be right.
    pub message: String,
}

impl ModelError {
    /// An error with only a message.
    pub fn new(message: impl Into<String>) -> Self {
        ModelError { file: None, position: None, element: None, key: None, message: message.into() }
    }

    /// An error about one key of one element.
    pub fn at(element: Option<Element>, key: Option<&str>, message: impl Into<String>) -> Self {
        ModelError { element, key: key.map(str::to_owned), ..ModelError::new(message) }
    }

    /// Sets the file name (keeps a name already set).
    pub fn in_file(mut self, file: impl Into<String>) -> Self {
        if self.file.is_none() {
            self.file = Some(file.into());
        }
        self
    }

    /// Sets the element when none is set yet.
    pub fn for_element(mut self, element: Element) -> Self {
        if self.element.is_none() {
            self.element = Some(element);
        }
        self
    }
}

impl fmt::Display for ModelError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if let Some(file) = &self.file {
            write!(f, "{file}")?;
            if let Some((line, col)) = self.position {
                write!(f, ":{line}:{col}")?;
            }
            write!(f, ": ")?;
        } else if let Some((line, col)) = self.position {
            write!(f, "line {line}, column {col}: ")?;
        }
        if let Some(element) = &self.element {
            write!(f, "{element}: ")?;
        }
        if let Some(key) = &self.key {
            write!(f, "key '{}': ", printable(key))?;
        }
        f.write_str(&self.message)
    }
}

impl std::error::Error for ModelError {}

/// One element with a value, named in a solver diagnosis (for example a node's last head change).
#[derive(Clone, Debug, PartialEq)]
pub struct Offender {
    /// The element's id.
    pub id: String,
    /// The value reached (SI).
    pub value: f64,
}

/// The solver could not produce a trustworthy answer.
#[derive(Clone, Debug, PartialEq)]
#[non_exhaustive]
pub enum SolveError {
    /// The model failed validation.
    Model(ModelError),
    /// The iteration limit was reached before the tolerances were met.
    NotConverged {
        /// Iterations done.
        iterations: u32,
        /// Largest head change of the last iteration, m.
        head_change: f64,
        /// Relative flow change of the last iteration.
        flow_change: f64,
        /// Largest energy-equation residual over open links, m.
        energy_residual: f64,
        /// Nodes with the largest last head change (m), worst first.
        worst_nodes: Vec<Offender>,
        /// Links with the largest energy-equation residual (m), worst first.
        worst_links: Vec<Offender>,
        /// Junctions with the largest mass imbalance (m³/s), worst first: set when the iteration
        /// stopped at a point whose mass balance does not close.
        worst_balances: Vec<Offender>,
    },
    /// The status of devices kept changing between the same states.
    StatusCycle {
        /// Iterations done.
        iterations: u32,
        /// Links whose status kept changing.
        links: Vec<String>,
    },
    /// A value of the solution is not a finite number (it overflowed): the element and what.
    NonFinite {
        /// The node or link.
        element: Element,
        /// Which value: "head", "pressure", "flow", "head loss", "velocity", "head gain"...
        quantity: &'static str,
        /// The value (infinite or NaN).
        value: f64,
    },
    /// The linear system could not be factored (a pivot was not positive).
    Numerical {
        /// Iteration at which it happened.
        iteration: u32,
        /// What the factorization reported.
        detail: String,
    },
}

impl From<ModelError> for SolveError {
    fn from(e: ModelError) -> Self {
        SolveError::Model(e)
    }
}

fn list(items: &[Offender], unit: &str) -> String {
    items.iter().map(|o| format!("'{}' ({:.3e} {unit})", printable(&o.id), o.value)).collect::<Vec<_>>().join(", ")
}

impl fmt::Display for SolveError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            SolveError::Model(e) => e.fmt(f),
            SolveError::NotConverged {
                iterations,
                head_change,
                flow_change,
                energy_residual,
                worst_nodes,
                worst_links,
                worst_balances,
            } => {
                let plural = if *iterations == 1 { "" } else { "s" };
                write!(f, "the solver did not converge in {iterations} iteration{plural}: ")?;
                if head_change.is_finite() {
                    write!(f, "last largest head change {head_change:.3e} m, ")?;
                } else {
                    write!(f, "no head change measured yet, ")?;
                }
                write!(f, "relative flow change {flow_change:.3e}, largest energy residual {energy_residual:.3e} m")?;
                if !worst_nodes.is_empty() {
                    write!(f, "; nodes still moving most: {}", list(worst_nodes, "m"))?;
                }
                if !worst_links.is_empty() {
                    write!(f, "; links with the largest energy residual: {}", list(worst_links, "m"))?;
                }
                if !worst_balances.is_empty() {
                    write!(f, "; junctions whose mass balance does not close: {}", list(worst_balances, "m³/s"))?;
                }
                Ok(())
            }
            SolveError::StatusCycle { iterations, links } => write!(
                f,
                "device states kept cycling after {iterations} iterations; links involved: {}",
                links.iter().map(|l| format!("'{}'", printable(l))).collect::<Vec<_>>().join(", ")
            ),
            SolveError::NonFinite { element, quantity, value } => write!(
                f,
                "{element}: its {quantity} is not a finite number ({value}) in the solution: a value of the \
                 model, or one it leads to, is beyond what the arithmetic can carry (look at this element's \
                 values and those of its links: diameter, length, roughness, demand, speed, head)"
            ),
            SolveError::Numerical { iteration, detail } => {
                write!(f, "the linear system could not be factored at iteration {iteration}: {detail}")
            }
        }
    }
}

impl std::error::Error for SolveError {}
