//! `ringmain map`: the network drawn to scale and coloured by one quantity, as one self-contained
//! HTML page (canvas drawing, pan and zoom, a tooltip per element) or as an SVG file.
//!
//! Colours: viridis (van der Walt and Smith, 2015), perceptually uniform and readable with the
//! common colour-vision deficiencies, evaluated from a degree-6 polynomial fit of the published
//! table (largest error below 0.02 per channel; tests/python checks it against matplotlib's
//! table). Link quantities are coloured by magnitude (flow direction does not change the colour).
//! Elements that break a criterion of the model's `[criteria]` table are ringed in black on a
//! white halo, a mark that needs no colour to be seen. North is up: longitude/latitude models are
//! drawn in an equirectangular view scaled by cos(mean latitude), true to scale at that latitude.

use crate::gis::GisResults;
use ringmain_core::model::MapCoordinates;
use std::fmt::Write as _;
use std::io::{self, Write};

/// Viridis at `t` in [0, 1], as 8-bit RGB.
pub fn viridis(t: f64) -> [u8; 3] {
    // Polynomial fit of the viridis table (public domain; checked against matplotlib's table at
    // tenths in the test below, within 4 of 255).
    const C: [[f64; 3]; 7] = [
        [0.277_727_327_223_417_7, 0.005_407_344_544_966_578, 0.334_099_805_335_306_1],
        [0.105_093_043_108_577_4, 1.404_613_529_898_575, 1.384_590_162_594_685],
        [-0.330_861_828_725_556_3, 0.214_847_559_468_213, 0.095_095_163_028_236_59],
        [-4.634_230_498_983_486, -5.799_100_973_351_585, -19.332_440_956_279_87],
        [6.228_269_936_347_081, 14.179_933_366_805_09, 56.690_552_600_681_05],
        [4.776_384_997_670_288, -13.745_145_377_746_01, -65.353_032_633_372_34],
        [-5.435_455_855_934_631, 4.645_852_612_178_535, 26.312_435_249_583_2],
    ];
    let t = if t.is_finite() { t.clamp(0.0, 1.0) } else { 0.0 };
    let mut out = [0u8; 3];
    for (ch, o) in out.iter_mut().enumerate() {
        let mut v = C[6][ch];
        for row in C[..6].iter().rev() {
            v = row[ch] + t * v;
        }
        *o = (v.clamp(0.0, 1.0) * 255.0).round() as u8;
    }
    out
}

fn hex(c: [u8; 3]) -> String {
    format!("#{:02x}{:02x}{:02x}", c[0], c[1], c[2])
}

/// The drawing's data: positions in a north-up plane, the scale, the values to colour by.
struct Scene {
    /// Plane position of each node.
    nodes: Vec<(f64, f64)>,
    /// Each link's drawn line in the plane.
    links: Vec<Vec<(f64, f64)>>,
    /// Metres (or model length units) per plane unit, and that unit's name.
    metres_per_unit: f64,
    length_unit: &'static str,
    on_links: bool,
    values: Vec<f64>,
    lo: f64,
    hi: f64,
}

fn scene(r: &GisResults<'_>, quantity: &str) -> Scene {
    let m = r.model;
    let q = r.quantity(quantity).expect("the caller checked the quantity");
    let lonlat = m.map.coordinates == MapCoordinates::LonLat;
    let raw: Vec<(f64, f64)> = m.nodes().iter().map(|n| n.coordinates.unwrap_or_default()).collect();
    let mean_lat = raw.iter().map(|p| p.1).sum::<f64>() / raw.len().max(1) as f64;
    let kx = if lonlat { mean_lat.to_radians().cos() } else { 1.0 };
    let plane = |p: (f64, f64)| (p.0 * kx, p.1);
    let links = (0..m.links().len())
        .map(|k| m.map.alignment(m, k).unwrap_or_default().into_iter().map(plane).collect())
        .collect();
    let values: Vec<f64> = q.values.iter().map(|v| if q.on_links { v.abs() } else { *v }).collect();
    let finite = values.iter().copied().filter(|v| v.is_finite());
    let lo = finite.clone().fold(f64::INFINITY, f64::min);
    let hi = finite.fold(f64::NEG_INFINITY, f64::max);
    let (lo, hi) = if lo.is_finite() { (lo, hi) } else { (0.0, 1.0) };
    Scene {
        nodes: raw.into_iter().map(plane).collect(),
        links,
        // One degree of latitude: 111 320 m is the usual round figure (common practice for map
        // scale bars; the geodesic varies from 110.6 to 111.7 km).
        metres_per_unit: if lonlat { 111_320.0 } else { 1.0 },
        length_unit: if lonlat { "m" } else { m.units.length.label() },
        on_links: q.on_links,
        values,
        lo,
        hi,
    }
}

fn fraction(s: &Scene, v: f64) -> f64 {
    if s.hi > s.lo {
        (v - s.lo) / (s.hi - s.lo)
    } else {
        0.5
    }
}

/// The label of the legend: "pressure (kPa)", "|flow| (L/s)".
fn legend_label(r: &GisResults<'_>, quantity: &str) -> String {
    let q = r.quantity(quantity).expect("checked");
    let name = quantity.replace('_', " ");
    if q.on_links {
        format!("|{name}| ({})", q.unit)
    } else {
        format!("{name} ({})", q.unit)
    }
}

/// A round scale-bar length near a fifth of `span` (1, 2 or 5 times a power of ten).
fn round_length(span: f64) -> f64 {
    let target = span / 5.0;
    if !(target.is_finite() && target > 0.0) {
        return 1.0;
    }
    let p = 10f64.powf(target.log10().floor());
    [1.0, 2.0, 5.0, 10.0].into_iter().map(|f| f * p).rfind(|&v| v <= target).unwrap_or(p)
}

/// Writes the SVG map.
pub fn write_svg(r: &GisResults<'_>, quantity: &str, out: &mut dyn Write) -> io::Result<()> {
    let s = scene(r, quantity);
    let m = r.model;
    let (mut x0, mut y0, mut x1, mut y1) = (f64::INFINITY, f64::INFINITY, f64::NEG_INFINITY, f64::NEG_INFINITY);
    for line in &s.links {
        for p in line {
            x0 = x0.min(p.0);
            x1 = x1.max(p.0);
            y0 = y0.min(p.1);
            y1 = y1.max(p.1);
        }
    }
    for p in &s.nodes {
        x0 = x0.min(p.0);
        x1 = x1.max(p.0);
        y0 = y0.min(p.1);
        y1 = y1.max(p.1);
    }
    let span = (x1 - x0).max(y1 - y0).max(1e-12);
    let (w, h, pad, legend_w) = (1000.0, 800.0, 40.0, 220.0);
    let scale =
        ((w - legend_w - 2.0 * pad) / (x1 - x0).max(span * 1e-3)).min((h - 2.0 * pad) / (y1 - y0).max(span * 1e-3));
    let px = |p: (f64, f64)| (pad + (p.0 - x0) * scale, h - pad - (p.1 - y0) * scale);
    let mut t = String::with_capacity(200 * (s.links.len() + s.nodes.len()) + 4096);
    let _ = write!(
        t,
        "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"{w}\" height=\"{h}\" viewBox=\"0 0 {w} {h}\" font-family=\"sans-serif\" font-size=\"12\">\n<rect width=\"{w}\" height=\"{h}\" fill=\"white\"/>\n<title>{}</title>\n",
        xml(&format!("{} - {} - {}", m.title.as_deref().unwrap_or("ringmain network"), legend_label(r, quantity), r.basis))
    );
    t.push_str("<g id=\"links\" fill=\"none\" stroke-linecap=\"round\">\n");
    for (k, line) in s.links.iter().enumerate() {
        let colour = if s.on_links && s.values[k].is_finite() {
            hex(viridis(fraction(&s, s.values[k])))
        } else {
            "#9a9a9a".into()
        };
        let width = if s.on_links { 2.5 } else { 1.2 };
        let _ = write!(t, "<polyline stroke=\"{colour}\" stroke-width=\"{width}\" points=\"");
        for p in line {
            let (a, b) = px(*p);
            let _ = write!(t, "{a:.1},{b:.1} ");
        }
        let _ = writeln!(t, "\"><title>{}</title></polyline>", xml(&tooltip(r, true, k)));
    }
    t.push_str("</g>\n<g id=\"nodes\">\n");
    for (i, p) in s.nodes.iter().enumerate() {
        let (a, b) = px(*p);
        let colour = if !s.on_links && s.values[i].is_finite() {
            hex(viridis(fraction(&s, s.values[i])))
        } else {
            "#555555".into()
        };
        let radius = if s.on_links { 2.0 } else { 4.0 };
        let _ = writeln!(
            t,
            "<circle cx=\"{a:.1}\" cy=\"{b:.1}\" r=\"{radius}\" fill=\"{colour}\"><title>{}</title></circle>",
            xml(&tooltip(r, false, i))
        );
    }
    t.push_str("</g>\n<g id=\"breaks\" fill=\"none\">\n");
    for (i, p) in s.nodes.iter().enumerate().filter(|(i, _)| !r.node_breaks[*i].is_empty()) {
        let (a, b) = px(*p);
        let _ = writeln!(t, "<circle cx=\"{a:.1}\" cy=\"{b:.1}\" r=\"8\" stroke=\"white\" stroke-width=\"4\"/><circle cx=\"{a:.1}\" cy=\"{b:.1}\" r=\"8\" stroke=\"black\" stroke-width=\"2\"><title>{}</title></circle>", xml(&tooltip(r, false, i)));
    }
    for (k, line) in s.links.iter().enumerate().filter(|(k, _)| !r.link_breaks[*k].is_empty()) {
        let mid = line[line.len() / 2];
        let mid = if line.len() == 2 { ((line[0].0 + line[1].0) / 2.0, (line[0].1 + line[1].1) / 2.0) } else { mid };
        let (a, b) = px(mid);
        let _ = writeln!(t, "<circle cx=\"{a:.1}\" cy=\"{b:.1}\" r=\"8\" stroke=\"white\" stroke-width=\"4\"/><circle cx=\"{a:.1}\" cy=\"{b:.1}\" r=\"8\" stroke=\"black\" stroke-width=\"2\"><title>{}</title></circle>", xml(&tooltip(r, true, k)));
    }
    t.push_str("</g>\n");
    // Legend: colour bar with its ends and middle, the breakers' mark, scale bar, north arrow.
    let lx = w - legend_w + 10.0;
    let _ = writeln!(
        t,
        "<g id=\"legend\"><text x=\"{lx}\" y=\"30\" font-weight=\"bold\">{}</text>",
        xml(&legend_label(r, quantity))
    );
    let _ = writeln!(t, "<text x=\"{lx}\" y=\"46\" font-size=\"10\">{}</text>", xml(&r.basis));
    t.push_str("<defs><linearGradient id=\"ramp\" x1=\"0\" y1=\"1\" x2=\"0\" y2=\"0\">");
    for i in 0..=10 {
        let f = i as f64 / 10.0;
        let _ = write!(t, "<stop offset=\"{f}\" stop-color=\"{}\"/>", hex(viridis(f)));
    }
    t.push_str("</linearGradient></defs>\n");
    let _ = writeln!(t, "<rect x=\"{lx}\" y=\"60\" width=\"24\" height=\"200\" fill=\"url(#ramp)\" stroke=\"#333\"/>");
    for (f, y) in [(1.0, 64.0), (0.5, 164.0), (0.0, 264.0)] {
        let v = s.lo + f * (s.hi - s.lo);
        let _ = writeln!(t, "<text x=\"{}\" y=\"{y}\">{}</text>", lx + 32.0, number(v));
    }
    let _ = writeln!(t, "<circle cx=\"{}\" cy=\"292\" r=\"8\" fill=\"none\" stroke=\"black\" stroke-width=\"2\"/><text x=\"{}\" y=\"296\">breaks a criterion</text>", lx + 12.0, lx + 28.0);
    let bar = round_length(span * s.metres_per_unit);
    let bar_px = bar / s.metres_per_unit * scale;
    let _ = writeln!(
        t,
        "<g id=\"scale\"><rect x=\"{lx}\" y=\"330\" width=\"{bar_px:.1}\" height=\"6\" fill=\"black\"/><text x=\"{lx}\" y=\"352\">{} {}</text></g>",
        number(bar),
        s.length_unit
    );
    let _ = writeln!(
        t,
        "<g id=\"north\"><path d=\"M {a} 380 l 10 30 l -10 -8 l -10 8 z\" fill=\"black\"/><text x=\"{b}\" y=\"376\" font-weight=\"bold\">N</text></g></g>\n</svg>",
        a = lx + 12.0,
        b = lx + 7.0
    );
    out.write_all(t.as_bytes())
}

fn number(v: f64) -> String {
    if !v.is_finite() {
        return "-".into();
    }
    let a = v.abs();
    if a == 0.0 {
        "0".into()
    } else if a >= 1000.0 {
        format!("{v:.0}")
    } else if a >= 10.0 {
        format!("{v:.1}")
    } else if a >= 0.1 {
        format!("{v:.3}")
    } else {
        format!("{v:.3e}")
    }
}

fn xml(text: &str) -> String {
    text.replace('&', "&amp;").replace('<', "&lt;").replace('>', "&gt;").replace('"', "&quot;")
}

/// An element's tooltip: kind and id, then every value with its unit, then what it breaks.
fn tooltip(r: &GisResults<'_>, link: bool, i: usize) -> String {
    let m = r.model;
    let mut t = if link {
        let l = &m.links()[i];
        format!("{} {}", l.kind.label(), l.id)
    } else {
        let n = &m.nodes()[i];
        format!("{} {}", n.kind.label(), n.id)
    };
    for q in r.quantities.iter().filter(|q| q.on_links == link) {
        let _ = write!(t, "\n{}: {} {}", q.name.replace('_', " "), number(q.values[i]), q.unit);
    }
    let breaks = if link { &r.link_breaks[i] } else { &r.node_breaks[i] };
    if !breaks.is_empty() {
        let _ = write!(t, "\nbreaks: {}", breaks.join(", "));
    }
    t
}

/// Writes the HTML map: one page, the data and the drawing code inline, nothing fetched.
pub fn write_html(r: &GisResults<'_>, quantity: &str, out: &mut dyn Write) -> io::Result<()> {
    let s = scene(r, quantity);
    let m = r.model;
    // Compact data: flat coordinate arrays, one value and one tooltip per element.
    let round = |v: f64| (v * 1e7).round() / 1e7;
    let mut data = String::with_capacity(160 * (s.links.len() + s.nodes.len()) + 4096);
    data.push_str("{\"nodes\":[");
    for (i, p) in s.nodes.iter().enumerate() {
        if i > 0 {
            data.push(',');
        }
        let _ = write!(data, "{},{}", round(p.0), round(p.1));
    }
    data.push_str("],\"links\":[");
    for (k, line) in s.links.iter().enumerate() {
        if k > 0 {
            data.push(',');
        }
        data.push('[');
        for (j, p) in line.iter().enumerate() {
            if j > 0 {
                data.push(',');
            }
            let _ = write!(data, "{},{}", round(p.0), round(p.1));
        }
        data.push(']');
    }
    let json_num = |v: f64| if v.is_finite() { format!("{v}") } else { "null".into() };
    data.push_str("],\"values\":[");
    data.push_str(&s.values.iter().map(|&v| json_num(v)).collect::<Vec<_>>().join(","));
    data.push_str("],\"nodeKinds\":");
    data.push_str(&serde_json::to_string(&m.nodes().iter().map(|n| n.kind.label()).collect::<Vec<_>>())?);
    data.push_str(",\"nodeIds\":");
    data.push_str(&serde_json::to_string(&m.nodes().iter().map(|n| n.id.as_str()).collect::<Vec<_>>())?);
    data.push_str(",\"linkIds\":");
    data.push_str(&serde_json::to_string(&m.links().iter().map(|l| l.id.as_str()).collect::<Vec<_>>())?);
    data.push_str(",\"nodeTips\":");
    data.push_str(&serde_json::to_string(&(0..s.nodes.len()).map(|i| tooltip(r, false, i)).collect::<Vec<_>>())?);
    data.push_str(",\"linkTips\":");
    data.push_str(&serde_json::to_string(&(0..s.links.len()).map(|k| tooltip(r, true, k)).collect::<Vec<_>>())?);
    let node_breaks: Vec<usize> = (0..s.nodes.len()).filter(|&i| !r.node_breaks[i].is_empty()).collect();
    let link_breaks: Vec<usize> = (0..s.links.len()).filter(|&k| !r.link_breaks[k].is_empty()).collect();
    let _ = write!(
        data,
        ",\"nodeBreaks\":{},\"linkBreaks\":{},\"onLinks\":{},\"lo\":{},\"hi\":{},\"label\":{},\"basis\":{},\"metresPerUnit\":{},\"lengthUnit\":{},\"title\":{},\"ramp\":{}}}",
        serde_json::to_string(&node_breaks)?,
        serde_json::to_string(&link_breaks)?,
        s.on_links,
        json_num(s.lo),
        json_num(s.hi),
        serde_json::to_string(&legend_label(r, quantity))?,
        serde_json::to_string(&r.basis)?,
        s.metres_per_unit,
        serde_json::to_string(s.length_unit)?,
        serde_json::to_string(m.title.as_deref().unwrap_or("ringmain network"))?,
        serde_json::to_string(&(0..256).map(|i| hex(viridis(i as f64 / 255.0))).collect::<Vec<_>>())?
    );
    // `</` must not close the script element early.
    let data = data.replace("</", "<\\/");
    let title = xml(&format!("{} - {}", m.title.as_deref().unwrap_or("ringmain network"), legend_label(r, quantity)));
    out.write_all(HTML_HEAD.replace("{title}", &title).as_bytes())?;
    out.write_all(b"<script id=\"data\" type=\"application/json\">")?;
    out.write_all(data.as_bytes())?;
    out.write_all(b"</script>\n<script>\n")?;
    out.write_all(HTML_SCRIPT.as_bytes())?;
    out.write_all(b"</script>\n</body>\n</html>\n")
}

const HTML_HEAD: &str = r##"<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>{title}</title>
<style>
html, body { margin: 0; height: 100%; overflow: hidden; font: 13px sans-serif; background: #fff; }
#map { position: absolute; inset: 0; width: 100%; height: 100%; cursor: grab; }
#legend { position: absolute; top: 10px; right: 10px; background: rgba(255,255,255,0.92); border: 1px solid #888;
          padding: 8px 10px; border-radius: 4px; min-width: 180px; }
#legend h1 { font-size: 14px; margin: 0 0 2px 0; }
#legend .basis { font-size: 11px; color: #333; margin-bottom: 6px; }
#ramp { display: block; width: 160px; height: 14px; border: 1px solid #333; }
#ticks { display: flex; justify-content: space-between; width: 162px; font-size: 11px; }
#breakmark { display: inline-block; width: 12px; height: 12px; border: 2px solid #000; border-radius: 50%; vertical-align: middle;
             box-shadow: 0 0 0 2px #fff; }
#tooltip { position: absolute; display: none; pointer-events: none; background: rgba(20,20,20,0.9); color: #fff;
           padding: 6px 8px; border-radius: 4px; white-space: pre; font-size: 12px; }
#scale { position: absolute; left: 12px; bottom: 14px; background: rgba(255,255,255,0.85); padding: 3px 6px; }
#scalebar { height: 6px; background: #000; }
#north { position: absolute; left: 14px; top: 12px; text-align: center; font-weight: bold; }
#caution { position: absolute; right: 10px; bottom: 8px; font-size: 10px; color: #444; max-width: 420px; text-align: right; }
</style>
</head>
<body>
<canvas id="map"></canvas>
<div id="north"><div>N</div><svg width="22" height="30" viewBox="0 0 22 30"><path d="M11 0 L22 30 L11 22 L0 30 Z" fill="#000"/></svg></div>
<div id="legend"><h1 id="label"></h1><div class="basis" id="basis"></div><canvas id="ramp" width="160" height="14"></canvas>
<div id="ticks"><span id="lo"></span><span id="mid"></span><span id="hi"></span></div>
<div style="margin-top:6px"><span id="breakmark"></span> breaks a criterion (<span id="breakcount">0</span>)</div></div>
<div id="scale"><div id="scalebar"></div><div id="scaletext"></div></div>
<div id="tooltip"></div>
<div id="caution">Results are only as good as the model and its data; designs must be checked by a licensed engineer against local codes and the utility's standards.</div>
"##;

const HTML_SCRIPT: &str = r##"(function () {
"use strict";
const D = JSON.parse(document.getElementById("data").textContent);
const canvas = document.getElementById("map");
const ctx = canvas.getContext("2d");
const tip = document.getElementById("tooltip");
const nNodes = D.nodes.length / 2;
const nLinks = D.links.length;
// Bounds of the drawing.
let x0 = Infinity, y0 = Infinity, x1 = -Infinity, y1 = -Infinity;
function grow(x, y) { if (x < x0) x0 = x; if (x > x1) x1 = x; if (y < y0) y0 = y; if (y > y1) y1 = y; }
for (let i = 0; i < nNodes; i++) grow(D.nodes[2 * i], D.nodes[2 * i + 1]);
for (const l of D.links) for (let j = 0; j < l.length; j += 2) grow(l[j], l[j + 1]);
if (!(x1 > x0)) { x1 = x0 + 1; } if (!(y1 > y0)) { y1 = y0 + 1; }
// Colour of a value: the index into the ramp (256 entries).
function bin(v) {
  if (v === null) return -1;
  const f = D.hi > D.lo ? (v - D.lo) / (D.hi - D.lo) : 0.5;
  return Math.max(0, Math.min(255, Math.round(f * 255)));
}
const linkBin = new Int16Array(nLinks), nodeBin = new Int16Array(nNodes);
for (let k = 0; k < nLinks; k++) linkBin[k] = D.onLinks ? bin(D.values[k]) : -1;
for (let i = 0; i < nNodes; i++) nodeBin[i] = D.onLinks ? -1 : bin(D.values[i]);
// Links grouped by colour (32 groups): one path per group keeps 100,000 links smooth.
const GROUPS = 32;
const groups = Array.from({ length: GROUPS + 1 }, () => []);
for (let k = 0; k < nLinks; k++) groups[linkBin[k] < 0 ? GROUPS : Math.floor(linkBin[k] / 8)].push(k);
// View: plane → screen is (x - cx) * s + w/2, (cy - y) * s + h/2.
let W = 0, H = 0, s = 1, cx = (x0 + x1) / 2, cy = (y0 + y1) / 2, dpr = window.devicePixelRatio || 1;
function fit() { s = 0.9 * Math.min(W / (x1 - x0), H / (y1 - y0)); cx = (x0 + x1) / 2; cy = (y0 + y1) / 2; }
function sx(x) { return (x - cx) * s + W / 2; }
function sy(y) { return (cy - y) * s + H / 2; }
function resize() {
  W = window.innerWidth; H = window.innerHeight;
  canvas.width = W * dpr; canvas.height = H * dpr;
  canvas.style.width = W + "px"; canvas.style.height = H + "px";
}
let pending = false;
function request() { if (!pending) { pending = true; requestAnimationFrame(draw); } }
function draw() {
  pending = false;
  ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
  ctx.fillStyle = "#ffffff"; ctx.fillRect(0, 0, W, H);
  ctx.lineCap = "round"; ctx.lineJoin = "round";
  const vx0 = cx - W / 2 / s, vx1 = cx + W / 2 / s, vy0 = cy - H / 2 / s, vy1 = cy + H / 2 / s;
  // Uncoloured links first, then from the low end of the scale up: the high values (the ones a
  // reader looks for) stay on top where links overlap at small scales.
  for (const g of [GROUPS, ...Array.from({ length: GROUPS }, (_, i) => i)]) {
    const list = groups[g];
    if (!list.length) continue;
    ctx.strokeStyle = g === GROUPS ? "#9a9a9a" : D.ramp[Math.min(255, g * 8 + 4)];
    ctx.lineWidth = g === GROUPS ? 1.2 : 2.5;
    ctx.beginPath();
    for (const k of list) {
      const l = D.links[k];
      let lx0 = Infinity, lx1 = -Infinity, ly0 = Infinity, ly1 = -Infinity;
      for (let j = 0; j < l.length; j += 2) { lx0 = Math.min(lx0, l[j]); lx1 = Math.max(lx1, l[j]); ly0 = Math.min(ly0, l[j + 1]); ly1 = Math.max(ly1, l[j + 1]); }
      if (lx1 < vx0 || lx0 > vx1 || ly1 < vy0 || ly0 > vy1) continue;
      ctx.moveTo(sx(l[0]), sy(l[1]));
      for (let j = 2; j < l.length; j += 2) ctx.lineTo(sx(l[j]), sy(l[j + 1]));
    }
    ctx.stroke();
  }
  const small = nNodes > 20000 && s * (x1 - x0) < 4000;
  for (let i = 0; i < nNodes; i++) {
    const x = sx(D.nodes[2 * i]), y = sy(D.nodes[2 * i + 1]);
    if (x < -10 || y < -10 || x > W + 10 || y > H + 10) continue;
    const kind = D.nodeKinds[i];
    if (kind !== "junction") {
      ctx.fillStyle = nodeBin[i] >= 0 ? D.ramp[nodeBin[i]] : "#222";
      ctx.strokeStyle = "#000"; ctx.lineWidth = 1;
      ctx.beginPath();
      if (kind === "tank") { ctx.moveTo(x, y - 8); ctx.lineTo(x + 7, y + 6); ctx.lineTo(x - 7, y + 6); ctx.closePath(); }
      else ctx.rect(x - 6, y - 6, 12, 12);
      ctx.fill(); ctx.stroke();
    } else if (nodeBin[i] >= 0) {
      ctx.fillStyle = D.ramp[nodeBin[i]];
      ctx.beginPath(); ctx.arc(x, y, small ? 2 : 4, 0, 2 * Math.PI); ctx.fill();
    } else if (!small) {
      ctx.fillStyle = "#555";
      ctx.fillRect(x - 1.5, y - 1.5, 3, 3);
    }
  }
  function ring(x, y) {
    ctx.lineWidth = 5; ctx.strokeStyle = "#fff"; ctx.beginPath(); ctx.arc(x, y, 8, 0, 2 * Math.PI); ctx.stroke();
    ctx.lineWidth = 2; ctx.strokeStyle = "#000"; ctx.beginPath(); ctx.arc(x, y, 8, 0, 2 * Math.PI); ctx.stroke();
  }
  for (const i of D.nodeBreaks) ring(sx(D.nodes[2 * i]), sy(D.nodes[2 * i + 1]));
  for (const k of D.linkBreaks) { const m = mid(k); ring(sx(m[0]), sy(m[1])); }
  scaleBar();
}
function mid(k) {
  const l = D.links[k];
  let total = 0;
  for (let j = 2; j < l.length; j += 2) total += Math.hypot(l[j] - l[j - 2], l[j + 1] - l[j - 1]);
  let run = 0;
  for (let j = 2; j < l.length; j += 2) {
    const d = Math.hypot(l[j] - l[j - 2], l[j + 1] - l[j - 1]);
    if (run + d >= total / 2 && d > 0) { const t = (total / 2 - run) / d; return [l[j - 2] + t * (l[j] - l[j - 2]), l[j - 1] + t * (l[j + 1] - l[j - 1])]; }
    run += d;
  }
  return [l[0], l[1]];
}
function fmt(v) {
  if (v === null || !isFinite(v)) return "-";
  const a = Math.abs(v);
  if (a === 0) return "0";
  if (a >= 1000) return v.toFixed(0);
  if (a >= 10) return v.toFixed(1);
  if (a >= 0.1) return v.toFixed(3);
  return v.toExponential(2);
}
function scaleBar() {
  const metresPerPixel = D.metresPerUnit / s;
  const target = 120 * metresPerPixel;
  const p = Math.pow(10, Math.floor(Math.log10(target)));
  let len = p;
  for (const f of [1, 2, 5]) if (f * p <= target) len = f * p;
  document.getElementById("scalebar").style.width = (len / metresPerPixel) + "px";
  document.getElementById("scaletext").textContent = String(Number(len.toPrecision(6))) + " " + D.lengthUnit;
}
// Legend.
document.getElementById("label").textContent = D.label;
document.getElementById("basis").textContent = D.basis;
document.getElementById("lo").textContent = fmt(D.lo);
document.getElementById("mid").textContent = fmt((D.lo + D.hi) / 2);
document.getElementById("hi").textContent = fmt(D.hi);
document.getElementById("breakcount").textContent = D.nodeBreaks.length + D.linkBreaks.length;
const rc = document.getElementById("ramp").getContext("2d");
for (let i = 0; i < 160; i++) { rc.fillStyle = D.ramp[Math.round(i / 159 * 255)]; rc.fillRect(i, 0, 1, 14); }
document.title = D.title + " - " + D.label;
// Picking: a grid over the plane holds the segments and nodes of each cell.
const CELLS = Math.max(1, Math.min(512, Math.ceil(Math.sqrt(nLinks + nNodes) / 2)));
const cw = (x1 - x0) / CELLS, ch = (y1 - y0) / CELLS;
const grid = new Map();
function cell(x, y) { return [Math.max(0, Math.min(CELLS - 1, Math.floor((x - x0) / cw))), Math.max(0, Math.min(CELLS - 1, Math.floor((y - y0) / ch)))]; }
function put(cxi, cyi, item) { const key = cyi * CELLS + cxi; let b = grid.get(key); if (!b) grid.set(key, b = []); b.push(item); }
for (let i = 0; i < nNodes; i++) { const c = cell(D.nodes[2 * i], D.nodes[2 * i + 1]); put(c[0], c[1], -1 - i); }
for (let k = 0; k < nLinks; k++) {
  const l = D.links[k];
  for (let j = 2; j < l.length; j += 2) {
    const a = cell(Math.min(l[j - 2], l[j]), Math.min(l[j - 1], l[j + 1])), b = cell(Math.max(l[j - 2], l[j]), Math.max(l[j - 1], l[j + 1]));
    for (let u = a[0]; u <= b[0]; u++) for (let v = a[1]; v <= b[1]; v++) put(u, v, k);
  }
}
function segDist(px, py, ax, ay, bx, by) {
  const dx = bx - ax, dy = by - ay, l2 = dx * dx + dy * dy;
  let t = l2 > 0 ? ((px - ax) * dx + (py - ay) * dy) / l2 : 0;
  t = Math.max(0, Math.min(1, t));
  return Math.hypot(px - ax - t * dx, py - ay - t * dy);
}
// The element under a screen position: a node within 7 px first, else a link within 5 px.
function pick(mx, my) {
  const px = (mx - W / 2) / s + cx, py = cy - (my - H / 2) / s;
  const r = 7 / s;
  const a = cell(px - r, py - r), b = cell(px + r, py + r);
  let best = null, bestD = Infinity, bestNode = null, bestNodeD = Infinity;
  const seen = new Set();
  for (let u = a[0]; u <= b[0]; u++) for (let v = a[1]; v <= b[1]; v++) {
    const items = grid.get(v * CELLS + u);
    if (!items) continue;
    for (const it of items) {
      if (seen.has(it)) continue;
      seen.add(it);
      if (it < 0) {
        const i = -1 - it, d = Math.hypot(D.nodes[2 * i] - px, D.nodes[2 * i + 1] - py) * s;
        if (d < bestNodeD) { bestNodeD = d; bestNode = i; }
      } else {
        const l = D.links[it];
        for (let j = 2; j < l.length; j += 2) {
          const d = segDist(px, py, l[j - 2], l[j - 1], l[j], l[j + 1]) * s;
          if (d < bestD) { bestD = d; best = it; }
        }
      }
    }
  }
  if (bestNode !== null && bestNodeD <= 7) return { node: true, index: bestNode };
  if (best !== null && bestD <= 5) return { node: false, index: best };
  return null;
}
function showTip(hit, mx, my) {
  if (!hit) { tip.style.display = "none"; return; }
  tip.textContent = hit.node ? D.nodeTips[hit.index] : D.linkTips[hit.index];
  tip.style.left = Math.min(mx + 14, W - 260) + "px";
  tip.style.top = Math.min(my + 14, H - 140) + "px";
  tip.style.display = "block";
}
// Pan with the mouse, zoom with the wheel around the pointer.
let drag = null;
canvas.addEventListener("mousedown", e => { drag = { x: e.clientX, y: e.clientY, cx, cy }; canvas.style.cursor = "grabbing"; });
window.addEventListener("mouseup", () => { drag = null; canvas.style.cursor = "grab"; });
canvas.addEventListener("mousemove", e => {
  if (drag) { cx = drag.cx - (e.clientX - drag.x) / s; cy = drag.cy + (e.clientY - drag.y) / s; tip.style.display = "none"; request(); return; }
  showTip(pick(e.clientX, e.clientY), e.clientX, e.clientY);
});
canvas.addEventListener("mouseleave", () => { tip.style.display = "none"; });
canvas.addEventListener("wheel", e => {
  e.preventDefault();
  const f = Math.exp(-e.deltaY * 0.0015);
  const px = (e.clientX - W / 2) / s + cx, py = cy - (e.clientY - H / 2) / s;
  s *= f;
  cx = px - (e.clientX - W / 2) / s; cy = py + (e.clientY - H / 2) / s;
  request();
}, { passive: false });
window.addEventListener("resize", () => { resize(); request(); });
// For scripts and tests: where an element is drawn, and the element under a position.
window.ringmainMap = {
  screenPosition(id) {
    let i = D.nodeIds.indexOf(id);
    if (i >= 0) return [sx(D.nodes[2 * i]), sy(D.nodes[2 * i + 1])];
    i = D.linkIds.indexOf(id);
    if (i >= 0) { const m = mid(i); return [sx(m[0]), sy(m[1])]; }
    return null;
  },
  pick(mx, my) { const h = pick(mx, my); return h ? (h.node ? D.nodeIds[h.index] : D.linkIds[h.index]) : null; },
  redraw() { const t0 = performance.now(); draw(); return performance.now() - t0; },
  elements: nNodes + nLinks,
};
resize(); fit(); draw();
})();
"##;

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn viridis_matches_the_published_colours() {
        // Viridis at tenths, as matplotlib 3.11.2 gives it (`colormaps["viridis"]`, rounded to
        // 8 bits; van der Walt and Smith, 2015). The fit stays within 4 of 255 everywhere.
        let published = [
            (0.0, [0x44, 0x01, 0x54]),
            (0.1, [0x48, 0x24, 0x75]),
            (0.2, [0x41, 0x44, 0x87]),
            (0.3, [0x35, 0x5f, 0x8d]),
            (0.4, [0x2a, 0x78, 0x8e]),
            (0.5, [0x21, 0x91, 0x8c]),
            (0.6, [0x22, 0xa8, 0x84]),
            (0.7, [0x44, 0xbf, 0x70]),
            (0.8, [0x7a, 0xd1, 0x51]),
            (0.9, [0xbd, 0xdf, 0x26]),
            (1.0, [0xfd, 0xe7, 0x25]),
        ];
        for (t, want) in published {
            let got = viridis(t);
            for ch in 0..3 {
                assert!((got[ch] as i32 - want[ch]).abs() <= 4, "t = {t}: {got:?} vs {want:?}");
            }
        }
        // Perceptually ordered: lightness (Rec. 709 luma) rises along the map.
        let luma = |c: [u8; 3]| 0.2126 * c[0] as f64 + 0.7152 * c[1] as f64 + 0.0722 * c[2] as f64;
        for i in 0..100 {
            assert!(luma(viridis((i + 1) as f64 / 100.0)) > luma(viridis(i as f64 / 100.0)) - 0.5, "{i}");
        }
    }

    #[test]
    fn scale_bars_are_round_lengths() {
        assert_eq!(round_length(1234.0), 200.0);
        assert_eq!(round_length(5000.0), 1000.0);
        assert_eq!(round_length(0.9), 0.1);
    }
}
