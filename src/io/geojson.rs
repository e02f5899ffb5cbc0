//! Maps as GeoJSON (RFC 7946): a FeatureCollection whose features are the
//! areas, each named by one of its properties and drawn as a Polygon or a
//! MultiPolygon. Everything else is refused with the feature it is about:
//! a file that is not GeoJSON, a feature without the key property, a key met
//! twice, another geometry type.

use crate::core::contiguity::Point;
use crate::error::{Error, Result};
use serde_json::Value;
use std::path::Path;

/// One area of a map.
#[derive(Debug, Clone, PartialEq)]
pub struct MapArea {
    /// The key property's value, as text (a number as written in the file).
    pub key: String,
    /// The polygons' rings (outer boundaries and holes), all together.
    pub rings: Vec<Vec<Point>>,
}

fn fault(path: &Path, what: String) -> Error {
    Error::Input(format!("{}: {what}", path.display()))
}

/// A property value as the text that keys an area (text as is, a whole
/// number without a decimal point).
fn key_text(value: &Value) -> Option<String> {
    match value {
        Value::String(text) => Some(text.clone()),
        Value::Number(number) => Some(number.to_string()),
        _ => None,
    }
}

fn ring(value: &Value) -> Option<Vec<Point>> {
    value
        .as_array()?
        .iter()
        .map(|point| {
            let point = point.as_array()?;
            match (point.first()?.as_f64(), point.get(1)?.as_f64()) {
                (Some(x), Some(y)) if x.is_finite() && y.is_finite() => Some([x, y]),
                _ => None,
            }
        })
        .collect()
}

fn polygon_rings(value: &Value) -> Option<Vec<Vec<Point>>> {
    value.as_array()?.iter().map(ring).collect()
}

/// Reads the areas of the map at `path`, each keyed by its property `key`.
pub fn read_map(path: &Path, key: &str) -> Result<Vec<MapArea>> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| Error::Input(format!("{}: cannot read the map: {e}", path.display())))?;
    let document: Value =
        serde_json::from_str(&text).map_err(|e| fault(path, format!("not GeoJSON: not valid JSON ({e})")))?;
    if document.get("type").and_then(Value::as_str) != Some("FeatureCollection") {
        return Err(fault(path, "not GeoJSON: the top level is not a FeatureCollection".to_string()));
    }
    let features = document.get("features").and_then(Value::as_array).ok_or_else(|| {
        fault(path, "not GeoJSON: the FeatureCollection has no list of features".to_string())
    })?;
    let mut areas = Vec::with_capacity(features.len());
    let mut seen = std::collections::HashMap::new();
    for (i, feature) in features.iter().enumerate() {
        let number = i + 1;
        let properties = feature.get("properties").and_then(Value::as_object);
        let value = properties.and_then(|p| p.get(key)).ok_or_else(|| {
            let present: Vec<&str> =
                properties.map(|p| p.keys().map(String::as_str).collect()).unwrap_or_default();
            fault(
                path,
                format!(
                    "feature {number} has no property '{key}' (given as the key); its properties: {}",
                    if present.is_empty() { "none".to_string() } else { present.join(", ") }
                ),
            )
        })?;
        let area = key_text(value).ok_or_else(|| {
            fault(path, format!("feature {number}: the key '{key}' is {value}, not text or a number"))
        })?;
        if let Some(first) = seen.insert(area.clone(), number) {
            return Err(fault(path, format!("features {first} and {number} have the same key '{area}'")));
        }
        let geometry = feature
            .get("geometry")
            .filter(|g| !g.is_null())
            .ok_or_else(|| fault(path, format!("feature {number} ('{area}') has no geometry")))?;
        let kind = geometry.get("type").and_then(Value::as_str).unwrap_or("none");
        let coordinates = geometry.get("coordinates").unwrap_or(&Value::Null);
        let rings = match kind {
            "Polygon" => polygon_rings(coordinates),
            "MultiPolygon" => coordinates
                .as_array()
                .and_then(|polygons| polygons.iter().map(polygon_rings).collect::<Option<Vec<_>>>())
                .map(|polygons| polygons.into_iter().flatten().collect()),
            other => {
                return Err(fault(
                    path,
                    format!(
                        "feature {number} ('{area}') is a {other}; areas must be a Polygon or MultiPolygon"
                    ),
                ))
            }
        };
        let rings = rings.ok_or_else(|| {
            fault(
                path,
                format!(
                    "feature {number} ('{area}'): its {kind} coordinates are not lists of [x, y] numbers"
                ),
            )
        })?;
        areas.push(MapArea { key: area, rings });
    }
    if areas.is_empty() {
        return Err(fault(path, "the map has no features".to_string()));
    }
    Ok(areas)
}
