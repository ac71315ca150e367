//! The fields file (`FIELDS.toml`): which GIS attribute holds which model value, the units of
//! the attributes, the coordinates of the files, and the value tables (kinds, materials).
//!
//! Every key is documented in `examples/FIELDS.toml`. Unknown keys are errors (with a
//! suggestion), so that a misspelt attribute mapping never silently drops data.

use crate::error::{Element, ModelError};
use crate::format::read::{read_hydraulics, read_units};
use crate::format::tree::{self, Value};
use crate::model::HydraulicOptions;
use crate::units::did_you_mean;
use crate::units::{LengthUnit, UnitSystem};

/// The pipe attributes a fields file may map (model key → attribute name).
pub const PIPE_KEYS: &[&str] =
    &["id", "diameter", "roughness", "material", "status", "length", "minor_loss", "check_valve"];
/// The point attributes a fields file may map.
pub const POINT_KEYS: &[&str] =
    &["id", "kind", "elevation", "demand", "head", "level", "min_level", "max_level", "diameter", "zone"];
const TOP_KEYS: &[&str] = &["crs", "units", "pipes", "points", "kinds", "materials", "model"];
const CRS_KEYS: &[&str] = &["units"];

/// What a point becomes in the model.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum PointKind {
    /// A junction (hydrants, customers, valve and pump locations).
    Junction,
    /// A fixed-head source.
    Reservoir,
    /// A storage tank.
    Tank,
}

impl PointKind {
    fn parse(text: &str) -> Option<Self> {
        match text {
            "junction" => Some(PointKind::Junction),
            "reservoir" => Some(PointKind::Reservoir),
            "tank" => Some(PointKind::Tank),
            _ => None,
        }
    }

    /// The model kind's name.
    pub fn label(self) -> &'static str {
        match self {
            PointKind::Junction => "junction",
            PointKind::Reservoir => "reservoir",
            PointKind::Tank => "tank",
        }
    }
}

/// The coordinates of the GeoJSON files.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Crs {
    /// RFC 7946 longitude, latitude in degrees on WGS 84 (no `[crs]` table).
    LonLat,
    /// Projected x, y in this unit (`[crs] units = "m"` or `"ft"`).
    Projected(LengthUnit),
}

/// A fields file, read and checked.
#[derive(Clone, Debug)]
pub struct FieldMap {
    /// Coordinates of the input files.
    pub crs: Crs,
    /// Units of the attributes, and of the model written.
    pub units: UnitSystem,
    /// Hydraulic options of the model written (`[model]`).
    pub options: HydraulicOptions,
    /// The model's title (`[model] title`).
    pub title: Option<String>,
    /// Pipe attributes: (model key, attribute name).
    pub pipes: Vec<(&'static str, String)>,
    /// Point attributes: (model key, attribute name).
    pub points: Vec<(&'static str, String)>,
    /// Point kind attribute values → model kinds.
    pub kinds: Vec<(String, PointKind)>,
    /// Material attribute values → roughness in the model's law and units.
    pub materials: Vec<(String, f64)>,
}

impl FieldMap {
    /// The attribute mapped to a pipe key.
    pub fn pipe(&self, key: &str) -> Option<&str> {
        self.pipes.iter().find(|(k, _)| *k == key).map(|(_, a)| a.as_str())
    }

    /// The attribute mapped to a point key.
    pub fn point(&self, key: &str) -> Option<&str> {
        self.points.iter().find(|(k, _)| *k == key).map(|(_, a)| a.as_str())
    }
}

fn table_error(table: &str, key: Option<&str>, message: impl Into<String>) -> ModelError {
    ModelError::at(Some(Element::Table(table.into())), key, message)
}

fn entries(value: Value, table: &str) -> Result<Vec<(tree::Key, Value)>, ModelError> {
    match value {
        Value::Table(entries) => Ok(entries),
        other => Err(table_error(table, None, format!("must be a table, found {}", other.kind()))),
    }
}

fn unknown(table: &str, key: &str, known: &[&str]) -> ModelError {
    let hint = did_you_mean(key, known.iter().copied(), '\'');
    table_error(table, Some(key), format!("is not a known key{hint}; known keys here: {}", known.join(", ")))
}

/// Reads a mapping table (`pipes`, `points`): model key = attribute name.
fn mapping(value: Value, table: &str, known: &[&'static str]) -> Result<Vec<(&'static str, String)>, ModelError> {
    let mut out = Vec::new();
    for (key, v) in entries(value, table)? {
        let Some(&model_key) = known.iter().find(|k| **k == key.as_ref()) else {
            return Err(unknown(table, &key, known));
        };
        match v {
            Value::Str(name) if !name.is_empty() => out.push((model_key, name)),
            other => {
                return Err(table_error(
                    table,
                    Some(&key),
                    format!("must be the attribute's name as a non-empty string, found {}", other.kind()),
                ))
            }
        }
    }
    Ok(out)
}

/// Reads a fields file's text; errors name the file.
pub fn read_fields(text: &str, file: &str) -> Result<FieldMap, ModelError> {
    read_inner(text).map_err(|e| e.in_file(file))
}

fn read_inner(text: &str) -> Result<FieldMap, ModelError> {
    let tree = tree::parse_toml(text).map_err(|e| ModelError {
        position: e.position,
        ..ModelError::new(format!("TOML syntax error: {}", e.message))
    })?;
    let top = entries(tree, "fields")?;
    let mut crs = Crs::LonLat;
    let mut units = None;
    let mut model = None;
    let mut pipes = Vec::new();
    let mut points = Vec::new();
    let mut kinds = Vec::new();
    let mut materials_raw = Vec::new();
    for (key, value) in top {
        match key.as_ref() {
            "crs" => {
                for (k, v) in entries(value, "crs")? {
                    if k != "units" {
                        return Err(unknown("crs", &k, CRS_KEYS));
                    }
                    crs = match v {
                        Value::Str(s) => match LengthUnit::parse(&s) {
                            Some(u) => Crs::Projected(u),
                            None => {
                                return Err(table_error(
                                    "crs",
                                    Some("units"),
                                    format!(
                                        "unknown unit \"{}\"; expected \"m\" or \"ft\" (omit [crs] for longitude, latitude)",
                                        crate::error::printable(&s)
                                    ),
                                ))
                            }
                        },
                        other => {
                            return Err(table_error("crs", Some("units"), format!("must be a string, found {}", other.kind())))
                        }
                    };
                }
            }
            "units" => units = Some(read_units(value)?),
            "model" => model = Some(value),
            "pipes" => pipes = mapping(value, "pipes", PIPE_KEYS)?,
            "points" => points = mapping(value, "points", POINT_KEYS)?,
            "kinds" => {
                for (k, v) in entries(value, "kinds")? {
                    let kind = match &v {
                        Value::Str(s) => PointKind::parse(s),
                        _ => None,
                    };
                    let Some(kind) = kind else {
                        return Err(table_error(
                            "kinds",
                            Some(&k),
                            "must be \"junction\", \"reservoir\" or \"tank\" (the model kind this attribute value becomes)",
                        ));
                    };
                    kinds.push((k.into_owned(), kind));
                }
            }
            "materials" => {
                for (k, v) in entries(value, "materials")? {
                    let r = match v {
                        Value::Int(i) => i as f64,
                        Value::Float(x) => x,
                        other => {
                            return Err(table_error(
                                "materials",
                                Some(&k),
                                format!("must be a roughness (a number), found {}", other.kind()),
                            ))
                        }
                    };
                    if !(r.is_finite() && r > 0.0) {
                        return Err(table_error(
                            "materials",
                            Some(&k),
                            format!("must be a positive number, found {r}"),
                        ));
                    }
                    materials_raw.push((k.into_owned(), r));
                }
            }
            other => return Err(unknown("fields", other, TOP_KEYS)),
        }
    }
    let units = units.unwrap_or_default();
    let (options, title) = match model {
        None => (HydraulicOptions::default(), None),
        Some(value) => {
            let mut entries = entries(value, "model")?;
            let title = match entries.iter().position(|(k, _)| k == "title") {
                Some(i) => match entries.remove(i).1 {
                    Value::Str(s) => Some(s),
                    other => {
                        return Err(table_error(
                            "model",
                            Some("title"),
                            format!("must be a string, found {}", other.kind()),
                        ))
                    }
                },
                None => None,
            };
            let options = read_hydraulics(Value::Table(entries), &units).map_err(|mut e| {
                if e.element == Some(Element::Table("hydraulics".into())) {
                    e.element = Some(Element::Table("model".into()));
                }
                e
            })?;
            (options, title)
        }
    };
    let materials = materials_raw
        .into_iter()
        .map(|(k, r)| {
            let r = match options.headloss {
                crate::HeadLossLaw::HazenWilliams => r,
                crate::HeadLossLaw::DarcyWeisbach => units.roughness.to_si(r),
            };
            (k, r)
        })
        .collect();
    let map = FieldMap { crs, units, options, title, pipes, points, kinds, materials };
    if map.pipe("diameter").is_none() {
        return Err(table_error("pipes", Some("diameter"), "is missing: name the attribute that holds pipe diameters"));
    }
    if map.pipe("roughness").is_none() && map.pipe("material").is_none() {
        return Err(table_error(
            "pipes",
            Some("roughness"),
            "is missing: name the attribute that holds the roughness, or map material with a [materials] table",
        ));
    }
    if map.pipe("material").is_some() && map.materials.is_empty() {
        return Err(table_error(
            "materials",
            None,
            "is missing: the pipes table maps material, which needs a table of material → roughness",
        ));
    }
    if map.point("kind").is_some() && map.kinds.is_empty() {
        return Err(table_error(
            "kinds",
            None,
            "is missing: [points] kind needs a table of attribute value → model kind",
        ));
    }
    Ok(map)
}

#[cfg(test)]
mod tests {
    use super::*;

    const SAMPLE: &str = r#"
        pipes.id = "ASSET"
        pipes.diameter = "DIA"
        pipes.material = "MAT"
        [crs]
        units = "ft"
        [units]
        length = "ft"
        diameter = "in"
        flow = "gpm"
        [points]
        id = "NID"
        kind = "TYPE"
        [kinds]
        "HYD" = "junction"
        "SRC" = "reservoir"
        [materials]
        "DI" = 130
        [model]
        headloss = "hazen-williams"
        title = "Hilltop"
    "#;

    #[test]
    fn reads_every_table() {
        let f = read_fields(SAMPLE, "f.toml").unwrap();
        assert_eq!(f.crs, Crs::Projected(LengthUnit::Foot));
        assert_eq!(f.pipe("diameter"), Some("DIA"));
        assert_eq!(f.point("kind"), Some("TYPE"));
        assert_eq!(f.kinds[1], ("SRC".to_owned(), PointKind::Reservoir));
        assert_eq!(f.materials, vec![("DI".to_owned(), 130.0)]);
        assert_eq!(f.title.as_deref(), Some("Hilltop"));
    }

    #[test]
    fn the_sample_fields_file_reads() {
        let f = read_fields(include_str!("../../../examples/FIELDS.toml"), "examples/FIELDS.toml").unwrap();
        for key in PIPE_KEYS {
            assert!(f.pipe(key).is_some(), "the sample documents pipes.{key}");
        }
        for key in POINT_KEYS {
            assert!(f.point(key).is_some(), "the sample documents points {key}");
        }
        assert_eq!(f.crs, Crs::Projected(LengthUnit::Metre));
        assert_eq!(f.options.water, crate::model::WaterSpec::Temperature(12.0));
    }

    #[test]
    fn unknown_and_missing_keys_are_named() {
        let e =
            read_fields(&SAMPLE.replace("pipes.diameter = \"DIA\"", "pipes.diametre = \"DIA\""), "f.toml").unwrap_err();
        assert_eq!(e.key.as_deref(), Some("diametre"), "{e}");
        assert!(e.to_string().starts_with("f.toml: "), "{e}");
        let e = read_fields(&SAMPLE.replace("units = \"ft\"\n", "units = \"yd\"\n"), "f.toml").unwrap_err();
        assert_eq!(e.key.as_deref(), Some("units"), "{e}");
        let e = read_fields(&SAMPLE.replace("\"DI\" = 130", "\"DI\" = \"130\""), "f.toml").unwrap_err();
        assert_eq!(e.key.as_deref(), Some("DI"), "{e}");
        let e = read_fields(&SAMPLE.replace("headloss = \"hazen-williams\"", "headloss = 3"), "f.toml").unwrap_err();
        assert_eq!(e.element, Some(Element::Table("model".into())), "{e}");
    }
}
