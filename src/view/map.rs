//! Choropleth maps of a run's areas (`--map FILE --map-key PROPERTY`): the
//! raw value and the posterior mean side by side on one binned colour
//! scale, and the probability of exceeding `--above` when the run has it;
//! flagged areas outlined; each area's id and values in its SVG title (the
//! hover text); a legend with the scale's breaks. Drawn as plain SVG paths:
//! longitude and latitude scaled by the cosine of the map's middle latitude,
//! any other coordinates (projected ones) as they are.
//!
//! The colours are made here, in OKLab (Ottosson 2020, a perceptual colour
//! space): every scale's lightness falls steadily from its lowest class to
//! its highest, so it reads in the same order in greyscale; the ratio scale
//! turns from blue below its centre to orange and red above it, a contrast
//! that the common red-green colour deficiencies keep.

use super::collect::{AreaValues, TableAreas, LISTED};
use super::page::escape;
use super::Figure;
use crate::core::contiguity::Point;
use crate::error::Result;
use crate::io::geojson::MapArea;
use std::collections::HashMap;
use std::fmt::Write;

/// A map a report draws: its file, its key property and its areas.
pub struct ReportMap {
    /// The GeoJSON file, as given.
    pub file: String,
    /// The property naming each area by its group id.
    pub key: String,
    /// The areas, in the file's order.
    pub areas: Vec<MapArea>,
}

/// A binned colour scale: class i holds values in [breaks[i-1], breaks[i]).
#[derive(Debug, Clone, PartialEq)]
pub struct ColourScale {
    /// The class boundaries, increasing.
    pub breaks: Vec<f64>,
    /// One colour per class (one more than the breaks), as `#rrggbb`.
    pub colours: Vec<String>,
    /// Decimals shown in the legend.
    decimals: usize,
}

impl ColourScale {
    /// The class of `value`.
    fn class(&self, value: f64) -> usize {
        self.breaks.iter().take_while(|&&b| value >= b).count()
    }

    /// The colour of `value`.
    pub fn colour(&self, value: f64) -> &str {
        &self.colours[self.class(value)]
    }

    /// A ratio scale centred on `centre`: classes at 1/2, 2/3, 4/5, 10/11 of it
    /// and 1.1, 1.25, 1.5, 2 times it, lightness falling from the lowest class
    /// to the highest, blue below the centre class and orange to red above.
    pub fn ratio(centre: f64) -> Self {
        let steps = [0.5, 1.0 / 1.5, 0.8, 1.0 / 1.1, 1.1, 1.25, 1.5, 2.0];
        let breaks: Vec<f64> = steps.iter().map(|s| s * centre).collect();
        Self::diverging(breaks, 4, 1 + decimals_of(centre))
    }

    /// A scale centred on `centre` with steps of `step` (estimates: the
    /// centre class is centre ± step / 5).
    pub fn additive(centre: f64, step: f64) -> Self {
        let steps = [-2.0, -1.0, -0.5, -0.2, 0.2, 0.5, 1.0, 2.0];
        let breaks: Vec<f64> = steps.iter().map(|s| centre + s * step).collect();
        Self::diverging(breaks, 4, 1 + decimals_of(step))
    }

    /// Classes around the one at `middle` (the centre's): lightness falls
    /// steadily over all classes; hue blue below the middle, orange above,
    /// chroma growing with the distance from it.
    fn diverging(breaks: Vec<f64>, middle: usize, decimals: usize) -> Self {
        let classes = breaks.len() + 1;
        let colours = (0..classes)
            .map(|i| {
                let lightness = 0.95 - 0.6 * i as f64 / (classes - 1) as f64;
                let distance = (i as f64 - middle as f64) / middle as f64;
                let hue: f64 = if distance < 0.0 { 250.0 } else { 45.0 };
                let chroma = 0.015 + 0.14 * distance.abs();
                oklch_hex(lightness, chroma, hue)
            })
            .collect();
        ColourScale { breaks, colours, decimals }
    }

    /// A probability scale: classes at 0.05, 0.2, 0.5, 0.8 and 0.95, lightness
    /// falling and a violet hue deepening with the probability.
    pub fn probability() -> Self {
        let breaks = vec![0.05, 0.2, 0.5, 0.8, 0.95];
        let classes = breaks.len() + 1;
        let colours = (0..classes)
            .map(|i| {
                let share = i as f64 / (classes - 1) as f64;
                oklch_hex(0.96 - 0.6 * share, 0.02 + 0.13 * share, 300.0)
            })
            .collect();
        ColourScale { breaks, colours, decimals: 2 }
    }

    /// Each class's label: "< a", "a to b", "≥ z".
    fn labels(&self) -> Vec<String> {
        let shown = |v: f64| format!("{v:.*}", self.decimals);
        let mut labels = vec![format!("< {}", shown(self.breaks[0]))];
        labels.extend(self.breaks.windows(2).map(|w| format!("{} to {}", shown(w[0]), shown(w[1]))));
        labels.push(format!("≥ {}", shown(self.breaks[self.breaks.len() - 1])));
        labels
    }
}

/// Decimals that show `value`'s first two significant digits.
fn decimals_of(value: f64) -> usize {
    if value <= 0.0 || !value.is_finite() {
        return 2;
    }
    (1.0 - value.log10().floor()).clamp(0.0, 8.0) as usize
}

/// An OKLCh colour (lightness 0 to 1, chroma, hue in degrees) as sRGB hex,
/// its chroma reduced until it fits the sRGB gamut.
pub fn oklch_hex(lightness: f64, chroma: f64, hue: f64) -> String {
    let (sin, cos) = hue.to_radians().sin_cos();
    let mut c = chroma;
    loop {
        let rgb = oklab_to_linear_srgb(lightness, c * cos, c * sin);
        if rgb.iter().all(|v| (-1e-9..=1.0 + 1e-9).contains(v)) || c <= 0.0 {
            let byte = |v: f64| (255.0 * gamma_encode(v.clamp(0.0, 1.0))).round() as u8;
            return format!("#{:02x}{:02x}{:02x}", byte(rgb[0]), byte(rgb[1]), byte(rgb[2]));
        }
        c = (c - 0.002).max(0.0);
    }
}

/// OKLab to linear sRGB (Ottosson's published matrices).
fn oklab_to_linear_srgb(l: f64, a: f64, b: f64) -> [f64; 3] {
    let l_ = (l + 0.396_337_777_4 * a + 0.215_803_757_3 * b).powi(3);
    let m_ = (l - 0.105_561_345_8 * a - 0.063_854_172_8 * b).powi(3);
    let s_ = (l - 0.089_484_177_5 * a - 1.291_485_548 * b).powi(3);
    [
        4.076_741_662_1 * l_ - 3.307_711_591_3 * m_ + 0.230_969_929_2 * s_,
        -1.268_438_004_6 * l_ + 2.609_757_401_1 * m_ - 0.341_319_396_5 * s_,
        -0.004_196_086_3 * l_ - 0.703_418_614_7 * m_ + 1.707_614_701 * s_,
    ]
}

/// The sRGB transfer function.
fn gamma_encode(v: f64) -> f64 {
    if v <= 0.003_130_8 {
        12.92 * v
    } else {
        1.055 * v.powf(1.0 / 2.4) - 0.055
    }
}

/// Relative luminance of a `#rrggbb` colour (what a greyscale print keeps).
pub fn luminance(hex: &str) -> f64 {
    let channel = |at: usize| {
        let v = f64::from(u8::from_str_radix(&hex[at..at + 2], 16).unwrap_or(0)) / 255.0;
        if v <= 0.040_45 {
            v / 12.92
        } else {
            ((v + 0.055) / 1.055).powf(2.4)
        }
    };
    0.2126 * channel(1) + 0.7152 * channel(3) + 0.0722 * channel(5)
}

/// Map coordinates to the page: longitude and latitude (every point within
/// ±180, ±90) shrunk in x by the cosine of the middle latitude, others as
/// they are; then scaled into a panel `width` wide, at most `max_height` high.
struct Projection {
    geographic_scale: f64,
    min: Point,
    scale: f64,
    height: f64,
}

impl Projection {
    fn of(areas: &[MapArea], width: f64, max_height: f64) -> Self {
        let points = || areas.iter().flat_map(|a| a.rings.iter().flatten());
        let geographic = points().all(|p| p[0].abs() <= 180.0 && p[1].abs() <= 90.0);
        let (mut low, mut high) = ([f64::INFINITY; 2], [f64::NEG_INFINITY; 2]);
        for p in points() {
            for k in 0..2 {
                low[k] = low[k].min(p[k]);
                high[k] = high[k].max(p[k]);
            }
        }
        let geographic_scale = if geographic { ((low[1] + high[1]) / 2.0).to_radians().cos() } else { 1.0 };
        let span_x = ((high[0] - low[0]) * geographic_scale).max(f64::MIN_POSITIVE);
        let span_y = (high[1] - low[1]).max(f64::MIN_POSITIVE);
        let scale = (width / span_x).min(max_height / span_y);
        Projection { geographic_scale, min: [low[0], high[1]], scale, height: span_y * scale }
    }

    fn place(&self, p: Point) -> (f64, f64) {
        ((p[0] - self.min[0]) * self.geographic_scale * self.scale, (self.min[1] - p[1]) * self.scale)
    }

    /// The SVG path data of an area's rings, offset by `dx`.
    fn path(&self, area: &MapArea, dx: f64) -> String {
        let mut d = String::new();
        for ring in &area.rings {
            for (i, &p) in ring.iter().enumerate() {
                let (x, y) = self.place(p);
                let _ = write!(d, "{}{:.1} {:.1}", if i == 0 { "M" } else { "L" }, x + dx, y);
            }
            d.push('Z');
        }
        d
    }
}

/// One panel of a map: what it shows of each area, and its heading.
struct Panel<'a> {
    heading: &'a str,
    value: &'a dyn Fn(&AreaValues) -> Option<f64>,
}

const PANEL_WIDTH: f64 = 420.0;
const GAP: f64 = 30.0;
const TOP: f64 = 24.0;
const NO_DATA: &str = "#d9d9d9";

/// An SVG of `panels` side by side on one scale, with the legend below.
fn map_svg(
    map: &ReportMap,
    values: &HashMap<String, AreaValues>,
    panels: &[Panel<'_>],
    (scale, scale_words): (&ColourScale, &str),
    title_of: &dyn Fn(&str, Option<&AreaValues>) -> String,
) -> String {
    let projection = Projection::of(&map.areas, PANEL_WIDTH, 520.0);
    let width = panels.len() as f64 * (PANEL_WIDTH + GAP) - GAP + 20.0;
    let legend_top = TOP + projection.height + 20.0;
    let labels = scale.labels();
    let height = legend_top + 70.0;
    let mut svg = format!(
        r#"<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {width:.0} {height:.0}" width="{width:.0}" height="{height:.0}" style="max-width:{width:.0}px" font-family="sans-serif" font-size="12" data-areas="{}">"#,
        map.areas.len()
    );
    for (place, panel) in panels.iter().enumerate() {
        let dx = 10.0 + place as f64 * (PANEL_WIDTH + GAP);
        let _ =
            write!(svg, r#"<text x="{dx:.0}" y="16" font-weight="bold">{}</text>"#, escape(panel.heading));
        let _ = write!(svg, r#"<g transform="translate(0 {TOP})" class="panel">"#);
        let mut outlines = String::new();
        for area in &map.areas {
            let found = values.get(&area.key);
            let fill = found.and_then(|v| (panel.value)(v)).map_or(NO_DATA, |v| scale.colour(v));
            let d = projection.path(area, dx);
            let _ = write!(
                svg,
                r##"<path class="area" data-key="{}" d="{d}" fill="{fill}" fill-rule="evenodd" stroke="#ffffff" stroke-width="0.6"><title>{}</title></path>"##,
                escape(&area.key),
                escape(&title_of(&area.key, found))
            );
            if found.is_some_and(|v| v.flagged) {
                let _ = write!(
                    outlines,
                    r##"<path class="flag-outline" d="{d}" fill="none" stroke="#111111" stroke-width="2"/>"##
                );
            }
        }
        svg.push_str(&outlines);
        svg.push_str("</g>");
    }
    // The legend: one swatch per class with its range, then no data and flagged.
    let _ = write!(svg, r#"<g class="legend" transform="translate(10 {legend_top:.0})">"#);
    let _ = write!(svg, r#"<text x="0" y="0">{}</text>"#, escape(scale_words));
    let classes = scale.colours.len();
    let swatch = ((width - 20.0) / (classes + 2) as f64).min(96.0);
    for (i, colour) in scale.colours.iter().enumerate() {
        let x = i as f64 * swatch;
        let _ = write!(
            svg,
            r##"<rect x="{x:.1}" y="8" width="{swatch:.1}" height="14" fill="{colour}" stroke="#888888" stroke-width="0.5"><title>{}</title></rect>"##,
            escape(&labels[i])
        );
    }
    // Each break under the edge between its two classes.
    for (i, &b) in scale.breaks.iter().enumerate() {
        let x = (i + 1) as f64 * swatch;
        let _ = write!(
            svg,
            r##"<line x1="{x:.1}" y1="22" x2="{x:.1}" y2="27" stroke="#444444"/><text x="{x:.1}" y="38" font-size="11" text-anchor="middle">{}</text>"##,
            format_args!("{b:.*}", scale.decimals)
        );
    }
    let x = classes as f64 * swatch + 12.0;
    let _ = write!(
        svg,
        r##"<rect x="{x:.1}" y="8" width="{:.1}" height="14" fill="{NO_DATA}" stroke="#888888" stroke-width="0.5"/><text x="{x:.1}" y="38" font-size="11">no data</text>"##,
        swatch - 6.0
    );
    let x = x + swatch;
    let _ = write!(
        svg,
        r##"<rect x="{x:.1}" y="8" width="{:.1}" height="14" fill="#ffffff" stroke="#111111" stroke-width="2"/><text x="{x:.1}" y="38" font-size="11">flagged</text>"##,
        swatch - 6.0
    );
    svg.push_str("</g></svg>");
    svg
}

/// How the report words and scales a map of its run.
pub struct MapTerms<'a> {
    /// What the raw value is called (`SMR`, `raw rate`, ...).
    pub raw_name: &'a str,
    /// The scale of the values, and its words for the legend.
    pub scale: ColourScale,
    /// The legend's words for that scale.
    pub scale_words: String,
    /// The threshold of `--above`, when the run has it.
    pub above: Option<f64>,
}

/// The map figures: the raw value and the posterior mean side by side, and
/// with `--above` the probability of exceeding it.
pub fn map_figures(map: &ReportMap, table: &TableAreas, terms: &MapTerms<'_>) -> Result<Vec<Figure>> {
    let values = &table.values;
    let number = super::page::num;
    let title_of = |key: &str, found: Option<&AreaValues>| match found {
        None => format!("{key}: not in the table"),
        Some(v) => {
            let mut text = format!(
                "{key}: {} {}, posterior mean {} ({} to {})",
                terms.raw_name,
                v.raw.map_or("n/a".to_string(), number),
                number(v.mean),
                number(v.lower),
                number(v.upper)
            );
            if let (Some(p), Some(t)) = (v.prob_above, terms.above) {
                let _ = write!(text, ", P(above {}) {}", number(t), number(p));
            }
            if v.flagged {
                text.push_str(", flagged");
            }
            text
        }
    };
    let lists = unmatched_words(&missing_areas(map, values), (&table.unmapped, table.unmapped_count));
    let raw_heading = format!("{} (raw)", terms.raw_name);
    let raw = |v: &AreaValues| v.raw;
    let mean = |v: &AreaValues| Some(v.mean);
    let panels =
        [Panel { heading: &raw_heading, value: &raw }, Panel { heading: "posterior mean", value: &mean }];
    let mut figures = vec![Figure {
        name: "map".into(),
        title: "Map: raw and posterior values".into(),
        caption: format!(
            "Each area's {} (left) and posterior mean (right) on one colour scale, from {} (areas keyed by its property '{}'); flagged areas outlined in black; hover over an area for its values. Small areas' raw values scatter to both ends of the scale; their posterior means sit nearer the centre.{lists}",
            terms.raw_name, map.file, map.key
        ),
        svg: map_svg(map, values, &panels, (&terms.scale, &terms.scale_words), &title_of),
    }];
    if let Some(threshold) = terms.above {
        let heading = format!("P(above {})", number(threshold));
        let probability = |v: &AreaValues| v.prob_above;
        let panels = [Panel { heading: &heading, value: &probability }];
        figures.push(Figure {
            name: "map-exceedance".into(),
            title: format!("Map: probability above {}", number(threshold)),
            caption: format!(
                "Each area's posterior probability that its rate is above {}; flagged areas outlined in black. A dark area is one whose own data and prior make a rate above the threshold likely, not a proven excess.",
                number(threshold)
            ),
            svg: map_svg(
                map,
                values,
                &panels,
                (&ColourScale::probability(), "posterior probability"),
                &title_of,
            ),
        });
    }
    Ok(figures)
}

/// The areas of the map that are not in the table, in the map's order.
fn missing_areas(map: &ReportMap, values: &HashMap<String, AreaValues>) -> Vec<String> {
    map.areas.iter().filter(|a| !values.contains_key(&a.key)).map(|a| a.key.clone()).collect()
}

/// The unmatched areas in words: `missing` (on the map, not in the table)
/// and `unmapped` (the first of `unmapped_count` in the table, not on the map).
fn unmatched_words(missing: &[String], (unmapped, unmapped_count): (&[String], usize)) -> String {
    let named = |keys: &[String], count: usize| {
        let shown: Vec<&str> = keys.iter().take(LISTED).map(String::as_str).collect();
        let more =
            if count > shown.len() { format!(" and {} more", count - shown.len()) } else { String::new() };
        format!("{}{more}", shown.join(", "))
    };
    let mut words = String::new();
    if !missing.is_empty() {
        let _ = write!(
            words,
            " Areas on the map but not in the table (grey): {}.",
            named(missing, missing.len())
        );
    }
    if unmapped_count > 0 {
        let _ = write!(words, " Areas in the table but not on the map: {}.", named(unmapped, unmapped_count));
    }
    words
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_scale_darkens_from_its_lowest_class_to_its_highest() {
        for scale in [ColourScale::ratio(1.0), ColourScale::additive(30.0, 5.0), ColourScale::probability()] {
            let lum: Vec<f64> = scale.colours.iter().map(|c| luminance(c)).collect();
            assert!(lum.windows(2).all(|w| w[1] < w[0] - 0.02), "{:?}: {lum:?}", scale.colours);
        }
    }

    #[test]
    fn values_fall_in_the_classes_of_their_breaks() {
        let scale = ColourScale::ratio(1.0);
        assert_eq!(scale.class(0.3), 0);
        assert_eq!(scale.class(1.0), 4, "the centre's class");
        assert_eq!(scale.class(1.1), 5, "a break starts its class");
        assert_eq!(scale.class(5.0), 8);
        assert_eq!(scale.labels()[4], "0.91 to 1.10");
        assert_eq!(scale.labels()[8], "≥ 2.00");
    }

    #[test]
    fn longitude_and_latitude_are_drawn_with_the_cosine_of_the_middle_latitude() {
        let square = |x: f64, y: f64, side: f64| MapArea {
            key: "a".into(),
            rings: vec![vec![[x, y], [x + side, y], [x + side, y + side], [x, y + side], [x, y]]],
        };
        // A one-degree square at 60 degrees north is drawn half as wide as it is high.
        let geographic = Projection::of(&[square(10.0, 59.5, 1.0)], 100.0, 100.0);
        let (left, top) = geographic.place([10.0, 60.5]);
        let (right, bottom) = geographic.place([11.0, 59.5]);
        assert!(((right - left) / (bottom - top) - 60f64.to_radians().cos()).abs() < 1e-12);
        assert_eq!((left, top), (0.0, 0.0), "north is up");
        // Projected coordinates (beyond ±180) are drawn as they are.
        let projected = Projection::of(&[square(500_000.0, 6_000_000.0, 1000.0)], 100.0, 100.0);
        let (left, top) = projected.place([500_000.0, 6_001_000.0]);
        let (right, bottom) = projected.place([501_000.0, 6_000_000.0]);
        assert!(((right - left) - (bottom - top)).abs() < 1e-9);
    }

    #[test]
    fn white_and_black_come_out_of_oklab_as_srgb() {
        assert_eq!(oklch_hex(1.0, 0.0, 0.0), "#ffffff");
        assert_eq!(oklch_hex(0.0, 0.0, 0.0), "#000000");
    }
}
