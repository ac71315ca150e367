//! Reading GeoJSON feature collections (RFC 7946) into lines and points with their attributes.
//!
//! The features are parsed one at a time, each converted by the `geojson` crate as soon as its
//! JSON tree is read and that tree dropped; on any problem the text is parsed again whole into
//! one JSON tree (syntax errors carry their line and column) and each feature converted in turn,
//! so that an error names the feature's index and id, in the same order of checks either way. Geometry rules: pipes are LineString features (or MultiLineString
//! features of one part), points are Point features (or MultiPoint of one point); a third
//! coordinate is kept as Z; every coordinate must be finite, and for longitude/latitude input
//! within ±180° and ±90°.

use crate::error::{Element, ModelError};
use geojson::JsonObject;

/// What geometry the features of a file must have.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Expect {
    /// LineString (or single-part MultiLineString).
    Lines,
    /// Point (or single-point MultiPoint).
    Points,
}

/// One feature: its index, its `id` member, its vertices (x, y), their Z when every vertex has
/// one, and its properties.
#[derive(Clone, Debug)]
pub struct Feature {
    /// Index in the file's `features` array.
    pub index: usize,
    /// The feature's `id` member, as text.
    pub member_id: Option<String>,
    /// Vertices in plan (one for a point).
    pub xy: Vec<(f64, f64)>,
    /// Z of each vertex, when every vertex has one.
    pub z: Option<Vec<f64>>,
    /// The properties (attributes); absent or null properties are an empty object.
    pub properties: JsonObject,
}

/// The error about one feature.
pub fn feature_error(index: usize, id: Option<&str>, key: Option<&str>, message: impl Into<String>) -> ModelError {
    ModelError::at(Some(Element::Feature { index, id: id.map(str::to_owned) }), key, message)
}

/// Text of a JSON id (string or number).
pub fn id_text(v: &serde_json::Value) -> Option<String> {
    match v {
        serde_json::Value::String(s) => Some(s.clone()),
        serde_json::Value::Number(n) => Some(n.to_string()),
        _ => None,
    }
}

/// Reads the features of a GeoJSON FeatureCollection; `lonlat` checks coordinate ranges;
/// `id_attribute` names the attribute used as the feature's id in messages.
pub fn read_features(
    bytes: &[u8],
    file: &str,
    expect: Expect,
    lonlat: bool,
    id_attribute: Option<&str>,
) -> Result<Vec<Feature>, ModelError> {
    read_inner(bytes, expect, lonlat, id_attribute).map_err(|e| e.in_file(file))
}

fn read_inner(
    bytes: &[u8],
    expect: Expect,
    lonlat: bool,
    id_attribute: Option<&str>,
) -> Result<Vec<Feature>, ModelError> {
    if let Some(features) = read_streamed(bytes, expect, lonlat, id_attribute) {
        return Ok(features);
    }
    read_whole(bytes, expect, lonlat, id_attribute)
}

/// Reads the features one at a time as the parser reaches them: each feature's JSON tree is
/// converted and dropped before the next is parsed, instead of the whole file's tree being built
/// first and freed last (at 100,000 pipes that was some 40 % of an import's time in allocating
/// and freeing, and most of its memory). Gives up (`None`) at the first problem of any kind (an
/// error, a repeated member), so that [`read_whole`] reads the file again and gives its error,
/// in the same order of checks as ever.
fn read_streamed(bytes: &[u8], expect: Expect, lonlat: bool, id_attribute: Option<&str>) -> Option<Vec<Feature>> {
    use serde::de::{DeserializeSeed, Error, IgnoredAny, MapAccess, SeqAccess, Visitor};
    struct Top<'a> {
        expect: Expect,
        lonlat: bool,
        id_attribute: Option<&'a str>,
    }
    impl<'de> Visitor<'de> for Top<'_> {
        type Value = Vec<Feature>;
        fn expecting(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
            f.write_str("a FeatureCollection")
        }
        fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<Vec<Feature>, A::Error> {
            let mut kind: Option<String> = None;
            let mut features: Option<Vec<Feature>> = None;
            let mut seen: Vec<String> = Vec::new();
            while let Some(key) = map.next_key::<String>()? {
                if seen.contains(&key) {
                    return Err(A::Error::custom("a repeated member"));
                }
                match key.as_str() {
                    "type" => kind = Some(map.next_value()?),
                    "features" => features = Some(map.next_value_seed(Items(&self))?),
                    _ => {
                        map.next_value::<IgnoredAny>()?;
                    }
                }
                seen.push(key);
            }
            match (kind.as_deref(), features) {
                (Some("FeatureCollection"), Some(features)) => Ok(features),
                _ => Err(A::Error::custom("not a FeatureCollection")),
            }
        }
    }
    struct Items<'t, 'a>(&'t Top<'a>);
    impl<'de> DeserializeSeed<'de> for Items<'_, '_> {
        type Value = Vec<Feature>;
        fn deserialize<D: serde::Deserializer<'de>>(self, d: D) -> Result<Vec<Feature>, D::Error> {
            d.deserialize_seq(self)
        }
    }
    impl<'de> Visitor<'de> for Items<'_, '_> {
        type Value = Vec<Feature>;
        fn expecting(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
            f.write_str("an array of features")
        }
        fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<Vec<Feature>, A::Error> {
            let t = self.0;
            let mut out = Vec::with_capacity(seq.size_hint().unwrap_or(0));
            while let Some(item) = seq.next_element::<serde_json::Value>()? {
                let feature = read_one(out.len(), item, t.expect, t.lonlat, t.id_attribute)
                    .map_err(|_| A::Error::custom("a feature with an error"))?;
                out.push(feature);
            }
            Ok(out)
        }
    }
    let mut de = serde_json::Deserializer::from_slice(bytes);
    let features = serde::Deserializer::deserialize_map(&mut de, Top { expect, lonlat, id_attribute }).ok()?;
    de.end().ok()?;
    Some(features)
}

/// Reads the whole file's JSON tree, then the features in turn.
fn read_whole(
    bytes: &[u8],
    expect: Expect,
    lonlat: bool,
    id_attribute: Option<&str>,
) -> Result<Vec<Feature>, ModelError> {
    let tree: serde_json::Value = serde_json::from_slice(bytes).map_err(|e| ModelError {
        position: (e.line() > 0).then(|| (e.line(), e.column())),
        ..ModelError::new(format!("not valid JSON (GeoJSON is JSON): {e}"))
    })?;
    let serde_json::Value::Object(mut top) = tree else {
        return Err(ModelError::new("GeoJSON must be a FeatureCollection object"));
    };
    match top.get("type").and_then(|t| t.as_str()) {
        Some("FeatureCollection") => {}
        Some(other) => {
            return Err(ModelError::at(
                None,
                Some("type"),
                format!("the file is a GeoJSON {other}; a FeatureCollection is expected"),
            ))
        }
        None => return Err(ModelError::at(None, Some("type"), "is missing; a GeoJSON FeatureCollection is expected")),
    }
    let Some(serde_json::Value::Array(items)) = top.remove("features") else {
        return Err(ModelError::at(None, Some("features"), "is missing or not an array"));
    };
    let mut out = Vec::with_capacity(items.len());
    for (index, item) in items.into_iter().enumerate() {
        out.push(read_one(index, item, expect, lonlat, id_attribute)?);
    }
    Ok(out)
}

fn read_one(
    index: usize,
    item: serde_json::Value,
    expect: Expect,
    lonlat: bool,
    id_attribute: Option<&str>,
) -> Result<Feature, ModelError> {
    // The id for messages, read before the conversion so that its errors can name it too.
    let raw_id = item.as_object().and_then(|o| {
        let from_attribute = id_attribute
            .and_then(|a| o.get("properties").and_then(|p| p.as_object()).and_then(|p| p.get(a)).and_then(id_text));
        from_attribute.or_else(|| o.get("id").and_then(id_text))
    });
    let err = |key: Option<&str>, m: String| feature_error(index, raw_id.as_deref(), key, m);
    let feature =
        geojson::Feature::from_json_value(item).map_err(|e| err(None, format!("not a GeoJSON Feature: {e}")))?;
    let member_id = feature.id.as_ref().map(|id| match id {
        geojson::feature::Id::String(s) => s.clone(),
        geojson::feature::Id::Number(n) => n.to_string(),
    });
    let Some(geometry) = feature.geometry else {
        return Err(err(Some("geometry"), "is null; every feature needs a geometry".into()));
    };
    use geojson::Value as G;
    let positions: Vec<Vec<f64>> = match (expect, geometry.value) {
        (Expect::Lines, G::LineString(line)) => line,
        (Expect::Lines, G::MultiLineString(mut parts)) if parts.len() == 1 => parts.pop().unwrap_or_default(),
        (Expect::Lines, G::MultiLineString(parts)) => {
            return Err(err(
                Some("geometry"),
                format!("is a MultiLineString of {} parts; split it into one LineString feature per pipe", parts.len()),
            ))
        }
        (Expect::Points, G::Point(p)) => vec![p],
        (Expect::Points, G::MultiPoint(mut ps)) if ps.len() == 1 => ps.pop().map(|p| vec![p]).unwrap_or_default(),
        (expect, other) => {
            let wanted = match expect {
                Expect::Lines => "a LineString (pipes)",
                Expect::Points => "a Point (points)",
            };
            return Err(err(Some("geometry"), format!("is a {}; expected {wanted}", other.type_name())));
        }
    };
    if expect == Expect::Lines && positions.len() < 2 {
        return Err(err(Some("geometry"), format!("a line needs at least 2 positions, found {}", positions.len())));
    }
    let mut xy = Vec::with_capacity(positions.len());
    let has_z = positions.iter().all(|p| p.len() >= 3);
    let mut z = has_z.then(|| Vec::with_capacity(positions.len()));
    for (i, p) in positions.iter().enumerate() {
        if p.len() < 2 || p.iter().any(|c| !c.is_finite()) {
            return Err(err(Some("geometry"), format!("position {} must be 2 or 3 finite numbers", i + 1)));
        }
        if lonlat && !(p[0].abs() <= 180.0 && p[1].abs() <= 90.0) {
            return Err(err(
                Some("geometry"),
                format!(
                    "position {} ({}, {}) is not a longitude, latitude; for projected coordinates add [crs] units = \"m\" (or \"ft\") to the fields file",
                    i + 1,
                    p[0],
                    p[1]
                ),
            ));
        }
        xy.push((p[0], p[1]));
        if let Some(z) = z.as_mut() {
            z.push(p[2]);
        }
    }
    Ok(Feature { index, member_id, xy, z, properties: feature.properties.unwrap_or_default() })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The streamed reader reads the features the whole-tree reader reads (members in any
    /// order, foreign members, 3D lines, ids as numbers), and gives up on everything the
    /// whole-tree reader must judge, so that its errors come out unchanged.
    #[test]
    fn streamed_features_are_the_whole_tree_reader_features_or_it_gives_up() {
        let text = r#"{"name": "invented", "features": [
            {"type": "Feature", "id": 7, "geometry": {"type": "LineString", "coordinates": [[0, 0, 1], [3.5, 4, 2]]},
             "properties": {"ASSET": "A-1", "DIAM": 150, "NOTE": null}},
            {"type": "Feature", "geometry": {"type": "MultiLineString", "coordinates": [[[3.5, 4], [9, 4], [9, 9]]]},
             "properties": {"ASSET": "A-2", "DIAM": 100.5}}
        ], "type": "FeatureCollection", "bbox": [0, 0, 9, 9]}"#;
        let streamed = read_streamed(text.as_bytes(), Expect::Lines, false, Some("ASSET")).expect("read in one pass");
        let whole = read_whole(text.as_bytes(), Expect::Lines, false, Some("ASSET")).unwrap();
        assert_eq!(format!("{streamed:?}"), format!("{whole:?}"));
        assert_eq!(streamed.len(), 2);
        assert_eq!(streamed[0].z, Some(vec![1.0, 2.0]));
        for bad in [
            text.replacen("\"LineString\"", "\"Point\"", 1),
            text.replacen("\"FeatureCollection\"", "\"Feature\"", 1),
            text.replacen("[0, 0, 1]", "[0, \"x\", 1]", 1),
            text.replacen("\"bbox\"", "\"features\"", 1),
            format!("{text} x"),
            text.replacen("\"type\": \"FeatureCollection\", ", "", 1),
        ] {
            assert!(read_streamed(bad.as_bytes(), Expect::Lines, false, Some("ASSET")).is_none(), "{bad}");
            assert!(read_features(bad.as_bytes(), "f.geojson", Expect::Lines, false, Some("ASSET")).is_err(), "{bad}");
        }
        // A repeated member: the whole tree keeps the last one; left to it.
        let repeated = text.replacen("\"name\"", "\"type\"", 1);
        assert!(read_streamed(repeated.as_bytes(), Expect::Lines, false, Some("ASSET")).is_none());
        let whole = read_features(repeated.as_bytes(), "f.geojson", Expect::Lines, false, Some("ASSET")).unwrap();
        assert_eq!(format!("{whole:?}"), format!("{streamed:?}"));
    }
}
