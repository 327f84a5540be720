//! SVG figures for the card, written by hand so they are small, byte-stable and need no fonts or
//! native libraries: line charts with optional error bars, dashed series and categorical x ticks.
//! Every series is a `<polyline class="series" data-series="...">` so tests can find it.

use std::fmt::Write;

pub(crate) struct Series {
    pub name: String,
    pub points: Vec<(f64, f64)>,
    /// Half-widths of error bars, one per point.
    pub errors: Option<Vec<f64>>,
    pub dashed: bool,
    /// Palette index; a train and a validation series of the same seed share one colour.
    pub colour: usize,
    /// Per point, when given: a marker sized by its weight, a vertical interval and a label
    /// (reliability diagrams: rows per bin and the Wilson interval).
    pub marks: Option<Vec<Mark>>,
    /// Drawn thin and pale, without point markers or a legend entry (ICE curves behind a
    /// partial dependence).
    pub background: bool,
}

/// How one point is drawn when its rows matter: `weight` in (0, 1] scales the marker's area.
pub(crate) struct Mark {
    pub weight: f64,
    pub lower: f64,
    pub upper: f64,
    pub label: String,
}

pub(crate) struct Chart {
    pub title: String,
    pub x_label: String,
    pub y_label: String,
    pub series: Vec<Series>,
    /// Categorical tick labels at x = 0, 1, 2, ...; numeric ticks when `None`.
    pub x_categories: Option<Vec<String>>,
    /// Draw the y = x diagonal (reliability diagrams).
    pub diagonal: bool,
    pub fixed_unit_axes: bool,
}

const PALETTE: [&str; 8] = ["#1f77b4", "#d62728", "#2ca02c", "#9467bd", "#ff7f0e", "#8c564b", "#17becf", "#7f7f7f"];
const W: f64 = 700.0;
const H: f64 = 400.0;
const LEFT: f64 = 70.0;
const RIGHT: f64 = 230.0;
const TOP: f64 = 40.0;
const BOTTOM: f64 = 55.0;

/// XML-escaped text for SVG content and attributes.
fn xml(s: &str) -> String {
    s.replace('&', "&amp;").replace('<', "&lt;").replace('>', "&gt;").replace('"', "&quot;").replace('\'', "&#39;")
}

fn f(x: f64) -> String {
    format!("{x:.2}")
}

/// Tick positions at a 1, 2 or 5 x 10^k step covering [lo, hi].
fn nice_ticks(lo: f64, hi: f64) -> Vec<f64> {
    let raw = (hi - lo) / 6.0;
    if !(raw.is_finite() && raw > 0.0) {
        return vec![lo];
    }
    let magnitude = libm::pow(10.0, libm::floor(libm::log10(raw)));
    let step = [1.0, 2.0, 5.0, 10.0].iter().map(|m| m * magnitude).find(|s| *s >= raw).unwrap_or(10.0 * magnitude);
    let first = (lo / step).ceil() as i64;
    let last = (hi / step).floor() as i64;
    (first..=last).map(|i| i as f64 * step).collect()
}

fn nice_range(lo: f64, hi: f64) -> (f64, f64) {
    if !(lo.is_finite() && hi.is_finite()) {
        return (0.0, 1.0);
    }
    if (hi - lo).abs() < 1e-12 {
        return (lo - 0.5, hi + 0.5);
    }
    let pad = (hi - lo) * 0.05;
    (lo - pad, hi + pad)
}

impl Chart {
    pub(crate) fn render(&self) -> String {
        let all: Vec<(f64, f64, f64)> = self
            .series
            .iter()
            .flat_map(|s| s.points.iter().enumerate().map(move |(i, p)| (p.0, p.1, s.errors.as_ref().map_or(0.0, |e| e[i]))))
            .filter(|p| p.0.is_finite() && p.1.is_finite())
            .collect();
        let (x0, x1) = if self.fixed_unit_axes {
            (0.0, 1.0)
        } else if let Some(c) = &self.x_categories {
            (-0.5, c.len() as f64 - 0.5)
        } else {
            nice_range(all.iter().map(|p| p.0).fold(f64::INFINITY, f64::min), all.iter().map(|p| p.0).fold(f64::NEG_INFINITY, f64::max))
        };
        let (y0, y1) = if self.fixed_unit_axes {
            (0.0, 1.0)
        } else {
            nice_range(
                all.iter().map(|p| p.1 - p.2).fold(f64::INFINITY, f64::min),
                all.iter().map(|p| p.1 + p.2).fold(f64::NEG_INFINITY, f64::max),
            )
        };
        let sx = |x: f64| LEFT + (x - x0) / (x1 - x0) * (W - LEFT - RIGHT);
        let sy = |y: f64| H - BOTTOM - (y - y0) / (y1 - y0) * (H - TOP - BOTTOM);
        let mut s = String::new();
        let _ = writeln!(
            s,
            r#"<svg xmlns="http://www.w3.org/2000/svg" width="{W}" height="{H}" viewBox="0 0 {W} {H}" font-family="sans-serif" font-size="12">"#
        );
        let _ = writeln!(s, r#"<title>{}</title>"#, xml(&self.title));
        let _ = writeln!(s, r##"<rect x="0" y="0" width="{W}" height="{H}" fill="#ffffff"/>"##);
        let _ = writeln!(s, r#"<text x="{}" y="22" font-size="14" font-weight="bold">{}</text>"#, f(LEFT), xml(&self.title));
        let _ = writeln!(
            s,
            r##"<rect x="{}" y="{}" width="{}" height="{}" fill="none" stroke="#444444"/>"##,
            f(LEFT),
            f(TOP),
            f(W - LEFT - RIGHT),
            f(H - TOP - BOTTOM)
        );
        for y in nice_ticks(y0, y1) {
            let _ = writeln!(
                s,
                r##"<line x1="{}" y1="{}" x2="{}" y2="{}" stroke="#dddddd"/><text x="{}" y="{}" text-anchor="end">{}</text>"##,
                f(LEFT),
                f(sy(y)),
                f(W - RIGHT),
                f(sy(y)),
                f(LEFT - 6.0),
                f(sy(y) + 4.0),
                xml(&crate::format::sig(y, 3))
            );
        }
        match &self.x_categories {
            Some(cats) => {
                for (i, c) in cats.iter().enumerate() {
                    let _ =
                        writeln!(s, r#"<text x="{}" y="{}" text-anchor="middle">{}</text>"#, f(sx(i as f64)), f(H - BOTTOM + 18.0), xml(c));
                }
            }
            None => {
                for x in nice_ticks(x0, x1) {
                    let _ = writeln!(
                        s,
                        r#"<text x="{}" y="{}" text-anchor="middle">{}</text>"#,
                        f(sx(x)),
                        f(H - BOTTOM + 18.0),
                        xml(&crate::format::sig(x, 3))
                    );
                }
            }
        }
        let _ = writeln!(
            s,
            r#"<text x="{}" y="{}" text-anchor="middle">{}</text>"#,
            f(LEFT + (W - LEFT - RIGHT) / 2.0),
            f(H - 12.0),
            xml(&self.x_label)
        );
        let _ = writeln!(
            s,
            r#"<text x="16" y="{}" text-anchor="middle" transform="rotate(-90 16 {})">{}</text>"#,
            f(H / 2.0),
            f(H / 2.0),
            xml(&self.y_label)
        );
        if self.diagonal {
            let _ = writeln!(
                s,
                r##"<line x1="{}" y1="{}" x2="{}" y2="{}" stroke="#999999" stroke-dasharray="3 3"/>"##,
                f(sx(0.0)),
                f(sy(0.0)),
                f(sx(1.0)),
                f(sy(1.0))
            );
        }
        for (i, series) in self.series.iter().enumerate() {
            let colour = PALETTE[series.colour % PALETTE.len()];
            let dash = if series.dashed { r#" stroke-dasharray="6 4""# } else { "" };
            let pts: Vec<String> = series
                .points
                .iter()
                .filter(|p| p.0.is_finite() && p.1.is_finite())
                .map(|p| format!("{},{}", f(sx(p.0)), f(sy(p.1))))
                .collect();
            if series.background {
                let _ = writeln!(
                    s,
                    r#"<polyline class="series background" data-series="{}" points="{}" fill="none" stroke="{colour}" stroke-width="0.7" stroke-opacity="0.35"/>"#,
                    xml(&series.name),
                    pts.join(" ")
                );
                continue;
            }
            let _ = writeln!(
                s,
                r#"<polyline class="series" data-series="{}" points="{}" fill="none" stroke="{colour}" stroke-width="1.8"{dash}/>"#,
                xml(&series.name),
                pts.join(" ")
            );
            for (j, p) in series.points.iter().enumerate() {
                if !(p.0.is_finite() && p.1.is_finite()) {
                    continue;
                }
                let mark = series.marks.as_ref().and_then(|m| m.get(j));
                let radius = mark.map_or(2.5, |m| 2.0 + 7.0 * m.weight.clamp(0.0, 1.0).sqrt());
                let _ = writeln!(
                    s,
                    r#"<circle cx="{}" cy="{}" r="{}" fill="{colour}" fill-opacity="0.6"/>"#,
                    f(sx(p.0)),
                    f(sy(p.1)),
                    f(radius)
                );
                if let Some(m) = mark {
                    let _ = writeln!(
                        s,
                        r#"<line x1="{}" y1="{}" x2="{}" y2="{}" stroke="{colour}"/><text x="{}" y="{}" font-size="10">{}</text>"#,
                        f(sx(p.0)),
                        f(sy(m.lower)),
                        f(sx(p.0)),
                        f(sy(m.upper)),
                        f(sx(p.0) + radius + 2.0),
                        f(sy(p.1) + 3.5),
                        xml(&m.label)
                    );
                }
                if let Some(e) = series.errors.as_ref().map(|e| e[j]).filter(|e| *e > 0.0) {
                    let _ = writeln!(
                        s,
                        r#"<line x1="{}" y1="{}" x2="{}" y2="{}" stroke="{colour}"/>"#,
                        f(sx(p.0)),
                        f(sy(p.1 - e)),
                        f(sx(p.0)),
                        f(sy(p.1 + e))
                    );
                }
            }
            let i = i - self.series[..i].iter().filter(|s| s.background).count();
            let ly = TOP + 14.0 + 18.0 * i as f64;
            let _ = writeln!(
                s,
                r#"<line x1="{}" y1="{}" x2="{}" y2="{}" stroke="{colour}" stroke-width="1.8"{dash}/><text x="{}" y="{}">{}</text>"#,
                f(W - RIGHT + 10.0),
                f(ly),
                f(W - RIGHT + 34.0),
                f(ly),
                f(W - RIGHT + 40.0),
                f(ly + 4.0),
                xml(&series.name)
            );
        }
        s.push_str("</svg>\n");
        s
    }
}
