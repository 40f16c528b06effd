//! The report's charts, drawn with plotters' SVG backend.
//!
//! Each chart plots figures the run already wrote; the only arithmetic here is chart geometry and,
//! when replications.csv exists, quantiles of per-replication values. Every plotted figure also gets
//! an invisible mark carrying the arm, the figure's column name and its exact value as data
//! attributes, at the same pixel as the drawn marker: a hover shows the value (no script needed),
//! and tests read the numbers back to check that the picture agrees with summary.csv.

use super::BoardError;
use super::input::{ArmRow, RunData};
use super::style::{self, BOX, FONT, GRID, INK, LegendEntry, MUTED, Marker, ROW, SERIES, STRESS, Svg};
use plotters::coord::Shift;
use plotters::coord::types::RangedCoordf64;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

/// One rendered chart.
#[derive(Debug, Clone)]
pub struct Chart {
    /// File stem under DIR/charts/ and the page anchor.
    pub name: &'static str,
    /// The chart's title (also drawn inside the SVG).
    pub title: String,
    /// How to read the chart, in plain words.
    pub caption: String,
    /// The standalone SVG document.
    pub svg: String,
}

/// Width of every chart in pixels; the page scales it to the window.
const WIDTH: i32 = 1100;
const TITLE_FONT: u32 = 21;
const TICK_FONT: u32 = 15;
const DESC_FONT: u32 = 16;

type Plot<'a, 'b> = ChartContext<'a, Svg<'b>, Cartesian2d<RangedCoordf64, RangedCoordf64>>;

/// Draws every chart the run's files allow, in page order.
pub fn all(d: &RunData) -> Result<Vec<Chart>, BoardError> {
    let mut out = Vec::new();
    for chart in [repayment(d)?, losses(d)?, cycles(d)?, differences(d)?, frontier(d)?] {
        out.extend(chart);
    }
    Ok(out)
}

/// The invisible, data-carrying marks of one chart.
#[derive(Default)]
struct Marks(Vec<String>);

impl Marks {
    /// Records a plotted figure at pixel `px`; `axis` says which pixel coordinate encodes the value.
    /// `what` is the (arm label, column name) of the figure.
    fn add(&mut self, px: (i32, i32), axis: char, what: (&str, &str), value: f64, extra: &[(&str, String)], tip: &str) {
        let (arm, series) = what;
        let mut s = format!(
            "<circle class=\"mark\" cx=\"{}\" cy=\"{}\" r=\"7\" fill=\"#000\" fill-opacity=\"0\" data-axis=\"{axis}\" \
             data-arm=\"{}\" data-series=\"{series}\" data-value=\"{value}\"",
            px.0,
            px.1,
            escape(arm)
        );
        for (k, v) in extra {
            s.push_str(&format!(" data-{k}=\"{}\"", escape(v)));
        }
        s.push_str(&format!("><title>{}</title></circle>", escape(tip)));
        self.0.push(s);
    }
}

/// Escapes text for XML and HTML, attributes included.
pub fn escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            _ => out.push(c),
        }
    }
    out
}

/// Tags the root element with the chart's name and appends the marks layer.
fn finish(name: &'static str, title: String, caption: String, svg: String, marks: Marks) -> Chart {
    let mut svg = svg.replacen(
        "<svg ",
        &format!(
            "<svg data-chart=\"{name}\" role=\"img\" aria-label=\"{}\" ",
            escape(&title)
        ),
        1,
    );
    let layer = format!("<g class=\"marks\">\n{}\n</g>\n", marks.0.join("\n"));
    match svg.rfind("</svg>") {
        Some(at) => svg.insert_str(at, &layer),
        None => svg.push_str(&layer),
    }
    Chart {
        name,
        title,
        caption,
        svg,
    }
}

fn font(size: u32) -> TextStyle<'static> {
    TextStyle::from((FONT, size).into_font()).color(&INK)
}

fn pct(x: f64, decimals: usize) -> String {
    format!("{:.*}%", decimals, x * 100.0)
}

/// Decimals that make tick labels over a span of `span` (in display units) distinct.
fn decimals(span: f64) -> usize {
    if span >= 8.0 {
        0
    } else if span >= 0.8 {
        1
    } else if span >= 0.08 {
        2
    } else {
        3
    }
}

/// Decimals that show a tick step of about `step` (in display units) exactly.
fn step_decimals(step: f64) -> usize {
    if step >= 0.95 {
        0
    } else if step >= 0.095 {
        1
    } else if step >= 0.0095 {
        2
    } else {
        3
    }
}

/// A signed tick label; zero is written plainly, never as -0.
fn signed(v: f64, decimals: usize) -> String {
    let text = format!("{v:+.decimals$}");
    if text[1..].chars().all(|c| c == '0' || c == '.') {
        "0".to_string()
    } else {
        text
    }
}

/// A padded range around values; `floor_zero` keeps it from crossing below 0.
fn padded(values: impl Iterator<Item = f64>, pad: f64, floor_zero: bool, cap: Option<f64>) -> (f64, f64) {
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for v in values {
        lo = lo.min(v);
        hi = hi.max(v);
    }
    if !lo.is_finite() {
        return (0.0, 1.0);
    }
    let span = (hi - lo).max(hi.abs() * 0.02).max(0.5);
    let (mut a, mut b) = (lo - span * pad, hi + span * pad);
    if floor_zero {
        a = a.max(0.0);
    }
    if let Some(c) = cap {
        b = b.min(c);
        if a >= b {
            a = (b - 1.0).max(0.0);
        }
    }
    (a, b)
}

/// The reader's words for a policy key on an axis.
fn key_words(key: &str) -> String {
    match key {
        "group_size" => "group size, members per group".into(),
        "exclusion_cycles" => "exclusion after a default, cycles".into(),
        "peer_cover" => "peer cover, share of a peer's surplus pledged".into(),
        "exclusion_scope" => "who sits out after a default".into(),
        "liability" => "liability".into(),
        "formation" => "how groups form each cycle".into(),
        "matching" => "how members are matched".into(),
        other => other.replace('_', " "),
    }
}

/// Cuts a long arm label for a chart; the tables show it whole.
fn short(label: &str, max: usize) -> String {
    if label.chars().count() <= max {
        label.to_string()
    } else {
        let mut s: String = label.chars().take(max - 1).collect();
        s.push('…');
        s
    }
}

/// Width of the arm-label column of row charts.
fn label_column(d: &RunData) -> (i32, usize) {
    let longest = d.arms.iter().map(|a| a.label.chars().count() + 5).max().unwrap_or(10);
    let chars = longest.min(52);
    (style::text_width(&"m".repeat(chars), TICK_FONT).min(430) + 24, chars)
}

fn row_label(a: &ArmRow, chars: usize) -> String {
    format!("{} · {}", a.number, short(&a.label, chars.saturating_sub(4)))
}

/// Where each arm sits on the x axis of the repayment chart, and which series it belongs to.
struct XLayout {
    desc: String,
    ticks: Vec<(f64, String)>,
    series: Vec<String>,
    /// Per arm: (series index, x position).
    place: Vec<(usize, f64)>,
    gap: f64,
}

fn x_layout(swept: &[String], arms: &[&ArmRow]) -> XLayout {
    let key = swept
        .first()
        .filter(|k| arms.iter().all(|a| a.keys.iter().any(|(ak, _)| ak == *k)))
        .cloned();
    if let Some(key) = key {
        let value = |a: &ArmRow| {
            a.keys
                .iter()
                .find(|(k, _)| *k == key)
                .map(|(_, v)| v.clone())
                .unwrap_or_default()
        };
        let rest = |a: &ArmRow| {
            a.keys
                .iter()
                .filter(|(k, _)| *k != key)
                .map(|(k, v)| format!("{k}={v}"))
                .collect::<Vec<_>>()
                .join(",")
        };
        let mut series: Vec<String> = Vec::new();
        let mut categories: Vec<String> = Vec::new();
        for a in arms {
            let (s, v) = (rest(a), value(a));
            if !series.contains(&s) {
                series.push(s);
            }
            if !categories.contains(&v) {
                categories.push(v);
            }
        }
        if series.len() <= SERIES.len() {
            let numeric: Option<Vec<f64>> = categories.iter().map(|c| c.parse::<f64>().ok()).collect();
            let position = |v: &str| match &numeric {
                Some(_) => v.parse::<f64>().unwrap_or(0.0),
                None => categories.iter().position(|c| c == v).unwrap_or(0) as f64,
            };
            let mut ticks: Vec<(f64, String)> = categories.iter().map(|c| (position(c), c.clone())).collect();
            ticks.sort_by(|a, b| a.0.total_cmp(&b.0));
            let gap = ticks
                .windows(2)
                .map(|w| w[1].0 - w[0].0)
                .filter(|g| *g > 0.0)
                .fold(f64::INFINITY, f64::min);
            let place = arms
                .iter()
                .map(|a| {
                    (
                        series.iter().position(|s| *s == rest(a)).unwrap_or(0),
                        position(&value(a)),
                    )
                })
                .collect();
            return XLayout {
                desc: key_words(&key),
                ticks,
                series,
                place,
                gap: if gap.is_finite() { gap } else { 1.0 },
            };
        }
    }
    // No sweep, or too many combinations for distinguishable series: one series along the arms.
    XLayout {
        desc: "arm, numbered as in the summary table".into(),
        ticks: arms.iter().map(|a| (a.number as f64, a.number.to_string())).collect(),
        series: vec![String::new()],
        place: arms.iter().map(|a| (0, a.number as f64)).collect(),
        gap: 1.0,
    }
}

/// Draws tick labels under the x axis at given positions (categorical axes).
fn x_ticks(
    root: &DrawingArea<Svg<'_>, Shift>,
    chart: &Plot<'_, '_>,
    y: f64,
    ticks: &[(f64, String)],
) -> Result<(), BoardError> {
    let style = font(TICK_FONT).pos(Pos::new(HPos::Center, VPos::Top));
    // Thin the labels when they would collide; every position keeps its tick mark.
    let mut last_right = i32::MIN;
    for (x, label) in ticks {
        let (px, py) = chart.backend_coord(&(*x, y));
        root.draw(&PathElement::new(vec![(px, py), (px, py + 6)], MUTED.stroke_width(1)))?;
        let w = style::text_width(label, TICK_FONT);
        if px - w / 2 > last_right + 8 {
            root.draw(&Text::new(label.clone(), (px, py + 9), style.clone()))?;
            last_right = px + w / 2;
        }
    }
    Ok(())
}

fn repayment(d: &RunData) -> Result<Option<Chart>, BoardError> {
    let arms: Vec<&ArmRow> = d.arms.iter().filter(|a| a.repayment.is_some()).collect();
    if arms.is_empty() {
        return Ok(None);
    }
    let layout = x_layout(&d.swept, &arms);
    let any_exact = arms.iter().any(|a| a.exact.is_some());
    let by_words = if layout.series.len() == 1 && layout.desc.starts_with("arm") {
        "by arm".to_string()
    } else {
        format!("by {}", layout.desc.split(',').next().unwrap_or(""))
    };
    let title = format!("Share of groups repaying in full, {by_words}");
    let mut entries: Vec<LegendEntry> = layout
        .series
        .iter()
        .enumerate()
        .map(|(i, s)| {
            LegendEntry::series(
                if s.is_empty() {
                    "simulated".to_string()
                } else {
                    format!("simulated, {s}")
                },
                SERIES[i],
            )
        })
        .collect();
    entries.push(LegendEntry::line("95% confidence interval", INK, None));
    if any_exact {
        entries.push(LegendEntry::mark(
            "exact one-factor value (hollow)",
            INK,
            Marker::Circle,
            true,
        ));
    }
    let legend_h = style::legend_height(&entries, WIDTH);
    let height = 560 + legend_h;
    let values = arms.iter().flat_map(|a| {
        let r = a.repayment.unwrap_or(0.0) * 100.0;
        let (lo, hi) = a.repayment_ci.map_or((r, r), |(l, h)| (l * 100.0, h * 100.0));
        [Some(r), Some(lo), Some(hi), a.exact.map(|e| e * 100.0)]
            .into_iter()
            .flatten()
    });
    let (y0, y1) = padded(values, 0.15, true, Some(100.0));
    let xs = layout.ticks.iter().map(|t| t.0);
    let (xmin, xmax) = (
        xs.clone().fold(f64::INFINITY, f64::min),
        xs.fold(f64::NEG_INFINITY, f64::max),
    );
    let (x0, x1) = (xmin - 0.6 * layout.gap, xmax + 0.6 * layout.gap);
    let n_series = layout.series.len() as f64;
    let slot = layout.gap * 0.5 / n_series;
    let mut marks = Marks::default();
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (WIDTH as u32, height as u32)).into_drawing_area();
        root.fill(&WHITE)?;
        let (top, legend_area) = root.split_vertically(height - legend_h);
        let mut chart = ChartBuilder::on(&top)
            .caption(&title, font(TITLE_FONT))
            .margin(18)
            .margin_right(30)
            .x_label_area_size(64)
            .y_label_area_size(84)
            .build_cartesian_2d(x0..x1, y0..y1)?;
        let dec = decimals(y1 - y0);
        chart
            .configure_mesh()
            .disable_x_mesh()
            .x_labels(0)
            .y_labels(8)
            .y_label_formatter(&|v| format!("{v:.dec$}"))
            .x_desc(layout.desc.clone())
            .y_desc("share of groups repaying in full, %")
            .axis_desc_style(font(DESC_FONT))
            .label_style(font(TICK_FONT))
            .bold_line_style(GRID)
            .light_line_style(WHITE)
            .axis_style(MUTED)
            .draw()?;
        x_ticks(&root, &chart, y0, &layout.ticks)?;
        for (s, &st) in SERIES.iter().enumerate().take(layout.series.len()) {
            let offset = (s as f64 - (n_series - 1.0) / 2.0) * slot;
            let mut members: Vec<(&ArmRow, f64)> = arms
                .iter()
                .zip(&layout.place)
                .filter(|(_, (si, _))| *si == s)
                .map(|(a, (_, x))| (*a, *x + offset))
                .collect();
            members.sort_by(|a, b| a.1.total_cmp(&b.1));
            let path: Vec<(f64, f64)> = members
                .iter()
                .map(|(a, x)| (*x, a.repayment.unwrap_or(0.0) * 100.0))
                .collect();
            if path.len() > 1 {
                style::line(chart.plotting_area(), path, st.color, 2, st.dash)?;
            }
            for (a, x) in &members {
                let r = a.repayment.unwrap_or(0.0);
                if let Some((lo, hi)) = a.repayment_ci {
                    let area = chart.plotting_area();
                    area.draw(&PathElement::new(
                        vec![(*x, lo * 100.0), (*x, hi * 100.0)],
                        INK.stroke_width(2),
                    ))?;
                    for v in [lo, hi] {
                        area.draw(
                            &(EmptyElement::at((*x, v * 100.0))
                                + PathElement::new(vec![(-6, 0), (6, 0)], INK.stroke_width(2))),
                        )?;
                    }
                }
                style::marker(chart.plotting_area(), (*x, r * 100.0), st.marker, st.color, false, 6)?;
                let ci = a.repayment_ci.map_or(String::new(), |(l, h)| {
                    format!(" (95% CI {} to {})", pct(l, 2), pct(h, 2))
                });
                marks.add(
                    chart.backend_coord(&(*x, r * 100.0)),
                    'y',
                    (&a.label, "group_repayment_rate"),
                    r,
                    &[],
                    &format!("{}: {} of groups repaid in full{ci}", a.label, pct(r, 2)),
                );
                if let Some(e) = a.exact {
                    let ex = *x + slot * 0.45 + layout.gap * 0.04;
                    style::marker(chart.plotting_area(), (ex, e * 100.0), st.marker, st.color, true, 6)?;
                    marks.add(
                        chart.backend_coord(&(ex, e * 100.0)),
                        'y',
                        (&a.label, "analytic_group_repayment"),
                        e,
                        &[],
                        &format!("{}: exact one-factor value {}", a.label, pct(e, 2)),
                    );
                }
            }
        }
        style::legend(&legend_area, &entries)?;
        root.present()?;
    }
    let mut caption = "Each filled marker is the simulated share of group-cycles repaid in full; the bar is its 95% \
        confidence interval, from the variation between independent replications."
        .to_string();
    if any_exact {
        caption.push_str(
            " The hollow marker beside it is the exact value of the one-factor model, shown where the arm belongs to that class.",
        );
    } else if let Some(note) = &d.analytic_note {
        caption.push_str(&format!(" No exact one-factor value applies: {note}."));
    }
    Ok(Some(finish("repayment", title, caption, svg, marks)))
}

/// Type-7 quantile of sorted values, or None when there are too few for it (at least 1/(1 - q)).
fn quantile(sorted: &[f64], q: f64) -> Option<f64> {
    let n = sorted.len();
    if n == 0 || (n as f64) < (1.0 / (1.0 - q)).round() {
        return None;
    }
    let h = (n - 1) as f64 * q;
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(n - 1);
    Some(sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo]))
}

/// What the loss chart shows of one arm.
struct LossRow<'a> {
    arm: &'a ArmRow,
    /// min, p25, p50, p75, max over replications.
    spread: Option<[f64; 5]>,
    /// p95, p99, p99.9 of the horizon loss.
    q: [Option<f64>; 3],
    worst: Option<f64>,
}

fn losses(d: &RunData) -> Result<Option<Chart>, BoardError> {
    let arms: Vec<&ArmRow> = d.arms.iter().filter(|a| a.loss.is_some()).collect();
    if arms.is_empty() {
        return Ok(None);
    }
    // Worst-cycle figure: the run's own quantile when it writes one, else from replications.csv,
    // else the single-cycle tail over all replication-cycles that older runs write.
    let has_worst = arms.iter().any(|a| a.worst_q[2].is_some())
        || d.replications
            .as_ref()
            .is_some_and(|r| r.values().any(|v| v.worst_cycle.len() >= 100));
    let (worst_series, worst_words) = if has_worst {
        (
            "worst_cycle_loss_p99",
            "worst single cycle, 99th percentile over replications",
        )
    } else {
        ("loss_cycle_p99", "single-cycle loss, 99th percentile over all cycles")
    };
    let rows: Vec<LossRow> = arms
        .iter()
        .map(|a| {
            let reps = d.replications.as_ref().and_then(|r| r.get(&a.label));
            let mut sorted = reps.map(|r| r.loss.clone()).unwrap_or_default();
            sorted.sort_by(f64::total_cmp);
            let spread = (sorted.len() >= 2).then(|| {
                [
                    sorted[0],
                    quantile(&sorted, 0.25).unwrap_or(sorted[0]),
                    quantile(&sorted, 0.5).unwrap_or(sorted[0]),
                    quantile(&sorted, 0.75).unwrap_or(sorted[0]),
                    sorted[sorted.len() - 1],
                ]
            });
            let q = [
                a.loss_q[1].or_else(|| quantile(&sorted, 0.95)),
                a.loss_q[2].or_else(|| quantile(&sorted, 0.99)),
                a.loss_q[3].or_else(|| quantile(&sorted, 0.999)),
            ];
            let worst = if has_worst {
                a.worst_q[2].or_else(|| {
                    let mut w = reps.map(|r| r.worst_cycle.clone()).unwrap_or_default();
                    w.sort_by(f64::total_cmp);
                    quantile(&w, 0.99)
                })
            } else {
                a.cycle_p99
            };
            LossRow {
                arm: a,
                spread,
                q,
                worst,
            }
        })
        .collect();
    let any_spread = rows.iter().any(|r| r.spread.is_some());
    let title = "Loss across replications, with the tail marked".to_string();
    let qstyle = [
        (SERIES[2], "95th percentile"),
        (SERIES[1], "99th percentile"),
        (SERIES[3], "99.9th percentile"),
    ];
    let mut entries = vec![LegendEntry::mark(
        "mean loss over the horizon",
        SERIES[0].color,
        Marker::Circle,
        false,
    )];
    for (i, (s, words)) in qstyle.iter().enumerate() {
        if rows.iter().any(|r| r.q[i].is_some()) {
            entries.push(LegendEntry::mark(
                format!("{words} of replications"),
                s.color,
                s.marker,
                false,
            ));
        }
    }
    if rows.iter().any(|r| r.worst.is_some()) {
        entries.push(LegendEntry::mark(worst_words, SERIES[5].color, Marker::Cross, false));
    }
    if any_spread {
        entries.push(LegendEntry::band(
            "middle half of replications (line: lowest to highest)",
            BOX,
        ));
    } else {
        entries.push(LegendEntry::line("median to highest percentile", MUTED, None));
    }
    let legend_h = style::legend_height(&entries, WIDTH);
    let (label_w, chars) = label_column(d);
    let row_h = 28;
    let n = rows.len();
    let plot_h = n as i32 * row_h + 60 + 70;
    let height = plot_h + legend_h;
    let xmax = rows
        .iter()
        .flat_map(|r| {
            let mut v = vec![r.arm.loss.unwrap_or(0.0)];
            v.extend(r.q.iter().flatten());
            v.extend(r.worst);
            v.extend(r.spread.map(|s| s[4]));
            v
        })
        .fold(0.0, f64::max)
        * 100.0;
    let x1 = if xmax > 0.0 { xmax * 1.08 } else { 1.0 };
    let mut marks = Marks::default();
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (WIDTH as u32, height as u32)).into_drawing_area();
        root.fill(&WHITE)?;
        let (top, legend_area) = root.split_vertically(plot_h);
        let mut chart = ChartBuilder::on(&top)
            .caption(&title, font(TITLE_FONT))
            .margin(14)
            .margin_right(30)
            .x_label_area_size(60)
            .y_label_area_size(label_w)
            .build_cartesian_2d(0.0..x1, -0.6..(n as f64 - 0.4))?;
        let dec = decimals(x1);
        chart
            .configure_mesh()
            .disable_y_mesh()
            .y_labels(0)
            .x_labels(10)
            .x_label_formatter(&|v| format!("{v:.dec$}"))
            .x_desc("portfolio loss, % of amount lent")
            .axis_desc_style(font(DESC_FONT))
            .label_style(font(TICK_FONT))
            .bold_line_style(GRID)
            .light_line_style(WHITE)
            .axis_style(MUTED)
            .draw()?;
        let area = chart.plotting_area().clone();
        let label_style = font(TICK_FONT).pos(Pos::new(HPos::Right, VPos::Center));
        for (i, r) in rows.iter().enumerate() {
            let y = (n - 1 - i) as f64;
            if i % 2 == 1 {
                area.draw(&Rectangle::new([(0.0, y - 0.5), (x1, y + 0.5)], ROW.filled()))?;
            }
            let (lx, ly) = chart.backend_coord(&(0.0, y));
            root.draw(&Text::new(row_label(r.arm, chars), (lx - 12, ly), label_style.clone()))?;
            match r.spread {
                Some([min, p25, p50, p75, max]) => {
                    area.draw(&PathElement::new(
                        vec![(min * 100.0, y), (max * 100.0, y)],
                        MUTED.stroke_width(1),
                    ))?;
                    area.draw(&Rectangle::new(
                        [(p25 * 100.0, y - 0.28), (p75 * 100.0, y + 0.28)],
                        BOX.filled(),
                    ))?;
                    area.draw(&PathElement::new(
                        vec![(p50 * 100.0, y - 0.28), (p50 * 100.0, y + 0.28)],
                        INK.stroke_width(2),
                    ))?;
                }
                None => {
                    let top = r.q.iter().flatten().copied().fold(f64::NEG_INFINITY, f64::max);
                    if let (Some(p50), true) = (r.arm.loss_q[0], top.is_finite()) {
                        area.draw(&PathElement::new(
                            vec![(p50 * 100.0, y), (top * 100.0, y)],
                            MUTED.stroke_width(2),
                        ))?;
                    }
                }
            }
            let label = &r.arm.label;
            if let Some(w) = r.worst {
                style::marker(&area, (w * 100.0, y), Marker::Cross, SERIES[5].color, false, 5)?;
                marks.add(
                    chart.backend_coord(&(w * 100.0, y)),
                    'x',
                    (label, worst_series),
                    w,
                    &[],
                    &format!("{label}: {worst_words} {}", pct(w, 2)),
                );
            }
            let names = ["loss_p95", "loss_p99", "loss_p999"];
            for (k, q) in r.q.iter().enumerate() {
                if let Some(q) = q {
                    let (s, words) = qstyle[k];
                    style::marker(&area, (q * 100.0, y), s.marker, s.color, false, 5)?;
                    marks.add(
                        chart.backend_coord(&(q * 100.0, y)),
                        'x',
                        (label, names[k]),
                        *q,
                        &[],
                        &format!("{label}: {words} of replications {}", pct(*q, 2)),
                    );
                }
            }
            let mean = r.arm.loss.unwrap_or(0.0);
            style::marker(&area, (mean * 100.0, y), Marker::Circle, SERIES[0].color, false, 6)?;
            marks.add(
                chart.backend_coord(&(mean * 100.0, y)),
                'x',
                (label, "loss_rate"),
                mean,
                &[],
                &format!("{label}: mean loss {}", pct(mean, 2)),
            );
        }
        style::legend(&legend_area, &entries)?;
        root.present()?;
    }
    let mut caption =
        "Each row is one arm. The circle is the loss over the whole horizon, as a share of the amount lent, \
        averaged over replications; the coloured markers show how bad an unlucky replication gets (its 95th, 99th and \
        99.9th percentiles, where there are enough replications to estimate them)."
            .to_string();
    caption.push_str(if has_worst {
        " The cross is the worst single cycle of a replication, at its 99th percentile: the figure for \"the worst period in a bad year\"."
    } else {
        " The cross is the 99th percentile of the loss in a single cycle, the one-period figure to set against capital."
    });
    if any_spread {
        caption.push_str(
            " The shaded box holds the middle half of replications; the thin line runs from the lowest to the highest.",
        );
    }
    Ok(Some(finish("losses", title, caption, svg, marks)))
}

/// The arms the cycle chart can show legibly: all of them up to six, else the baseline and the
/// arms at the extremes of repayment, loss and outreach.
fn shown_arms(d: &RunData) -> Vec<usize> {
    let n = d.arms.len();
    if n <= SERIES.len() {
        return (0..n).collect();
    }
    let pick = |f: &dyn Fn(&ArmRow) -> Option<f64>, max: bool| -> Option<usize> {
        let mut best: Option<(usize, f64)> = None;
        for (i, a) in d.arms.iter().enumerate() {
            if let Some(v) = f(a) {
                let better = best.is_none_or(|(_, b)| if max { v > b } else { v < b });
                if better {
                    best = Some((i, v));
                }
            }
        }
        best.map(|(i, _)| i)
    };
    let mut chosen = vec![0];
    let candidates = [
        pick(&|a| a.repayment, true),
        pick(&|a| a.loss, false),
        pick(&|a| a.served, true),
        pick(&|a| a.loss, true),
        pick(&|a| a.served, false),
    ];
    for c in candidates.into_iter().flatten() {
        if !chosen.contains(&c) && chosen.len() < SERIES.len() {
            chosen.push(c);
        }
    }
    // Arms from the middle and quarters of the list fill the remaining places, so the middle of a
    // sweep shows too.
    let target = SERIES.len() - 1;
    for fraction in [0.5, 0.25, 0.75, 0.375, 0.625] {
        let c = (fraction * (n - 1) as f64).round() as usize;
        if chosen.len() < target && !chosen.contains(&c) {
            chosen.push(c);
        }
    }
    chosen.sort_unstable();
    chosen
}

fn cycles(d: &RunData) -> Result<Option<Chart>, BoardError> {
    if d.cycles.is_empty() {
        return Ok(None);
    }
    let shown = shown_arms(d);
    type Get = fn(&super::input::CycleRow) -> Option<f64>;
    let panels: [(&str, &str, Get); 3] = [
        ("served_share", "served, % of borrower slots", |c| c.served),
        ("excluded_share", "excluded, % of borrower slots", |c| c.excluded),
        ("loss_rate", "loss in the cycle, % of amount lent", |c| c.loss),
    ];
    let series: Vec<(usize, Vec<&super::input::CycleRow>)> = shown
        .iter()
        .map(|&i| {
            let mut rows: Vec<_> = d.cycles.iter().filter(|c| c.arm == d.arms[i].label).collect();
            rows.sort_by_key(|c| c.cycle);
            (i, rows)
        })
        .filter(|(_, rows)| !rows.is_empty())
        .collect();
    if series.is_empty() {
        return Ok(None);
    }
    let first = series
        .iter()
        .flat_map(|(_, r)| r.iter().map(|c| c.cycle))
        .min()
        .unwrap_or(1) as f64;
    let last = series
        .iter()
        .flat_map(|(_, r)| r.iter().map(|c| c.cycle))
        .max()
        .unwrap_or(1) as f64;
    let title = "Served, excluded and lost, cycle by cycle".to_string();
    let mut entries: Vec<LegendEntry> = series
        .iter()
        .enumerate()
        .map(|(j, (i, _))| {
            LegendEntry::series(
                format!("{} · {}", d.arms[*i].number, short(&d.arms[*i].label, 48)),
                SERIES[j],
            )
        })
        .collect();
    let stress: Vec<_> = d
        .stress
        .iter()
        .filter(|w| (w.to as f64) >= first && (w.from as f64) <= last)
        .collect();
    if !stress.is_empty() {
        entries.push(LegendEntry::band("stress window", STRESS));
    }
    let legend_h = style::legend_height(&entries, WIDTH);
    let title_h = 48;
    let panel_h = 250;
    let height = title_h + 3 * panel_h + 30 + legend_h;
    let mut marks = Marks::default();
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (WIDTH as u32, height as u32)).into_drawing_area();
        root.fill(&WHITE)?;
        root.draw(&Text::new(
            title.clone(),
            (WIDTH / 2, 16),
            font(TITLE_FONT).pos(Pos::new(HPos::Center, VPos::Top)),
        ))?;
        let (body, legend_area) = root.split_vertically(height - legend_h);
        let (_, body) = body.split_vertically(title_h);
        let areas = body.split_evenly((3, 1));
        let span = (last - first).max(1.0);
        let tick_count = ((span + 1.0) as usize).min(13);
        for (p, ((series_name, desc, get), area)) in panels.iter().zip(areas.iter()).enumerate() {
            let bottom = p == panels.len() - 1;
            let values = series
                .iter()
                .flat_map(|(_, rows)| rows.iter().filter_map(|c| get(c).map(|v| v * 100.0)));
            let (y0, y1) = padded(values, 0.12, true, Some(100.0));
            let mut chart = ChartBuilder::on(area)
                .margin_left(18)
                .margin_right(30)
                .margin_top(10)
                .x_label_area_size(if bottom { 62 } else { 30 })
                .y_label_area_size(92)
                .build_cartesian_2d((first - 0.5)..(last + 0.5), y0..y1)?;
            let dec = decimals(y1 - y0);
            let x_fmt = |v: &f64| {
                if (v - v.round()).abs() < 1e-6 {
                    format!("{v:.0}")
                } else {
                    String::new()
                }
            };
            let y_fmt = |v: &f64| format!("{v:.dec$}");
            let mut mesh = chart.configure_mesh();
            mesh.x_labels(tick_count)
                .y_labels(5)
                .x_label_formatter(&x_fmt)
                .y_label_formatter(&y_fmt)
                .y_desc(*desc)
                .axis_desc_style(font(DESC_FONT))
                .label_style(font(TICK_FONT))
                .bold_line_style(GRID)
                .light_line_style(WHITE)
                .axis_style(MUTED);
            if bottom {
                mesh.x_desc("cycle (counted from 1, warm-up included)");
            }
            mesh.draw()?;
            let plot = chart.plotting_area().clone();
            for w in &stress {
                plot.draw(&Rectangle::new(
                    [(w.from as f64 - 0.5, y0), (w.to as f64 + 0.5, y1)],
                    STRESS.mix(0.8).filled(),
                ))?;
                if p == 0 {
                    let (px, py) = chart.backend_coord(&(w.from as f64 - 0.5, y1));
                    root.draw(&Text::new(format!("{} stress", w.shock), (px + 4, py + 4), font(13)))?;
                }
            }
            let every = ((span as usize) / 8).max(1);
            for (j, (i, rows)) in series.iter().enumerate() {
                let st = SERIES[j];
                let arm = &d.arms[*i];
                let points: Vec<(f64, f64)> = rows
                    .iter()
                    .filter_map(|c| get(c).map(|v| (c.cycle as f64, v * 100.0)))
                    .collect();
                style::line(&plot, points.clone(), st.color, 2, st.dash)?;
                for (k, c) in rows.iter().enumerate() {
                    let Some(v) = get(c) else { continue };
                    let at = (c.cycle as f64, v * 100.0);
                    // Markers on every few cycles, staggered by series so they do not stack.
                    if (k + j) % every == 0 {
                        style::marker(&plot, at, st.marker, st.color, false, 4)?;
                    }
                    marks.add(
                        chart.backend_coord(&at),
                        'y',
                        (&arm.label, series_name),
                        v,
                        &[("cycle", c.cycle.to_string())],
                        &format!(
                            "{}, cycle {}: {} {}",
                            arm.label,
                            c.cycle,
                            desc.split(',').next().unwrap_or(""),
                            pct(v, 2)
                        ),
                    );
                }
            }
        }
        style::legend(&legend_area, &entries)?;
        root.present()?;
    }
    let mut caption =
        "Means over replications for each counted cycle: the share of borrower slots served and excluded, \
        and the loss of the cycle as a share of what was lent in it."
            .to_string();
    if d.warmup > 0 {
        caption.push_str(&format!(
            " Warm-up cycles 1 to {} are not counted and not shown.",
            d.warmup
        ));
    }
    if !stress.is_empty() {
        caption.push_str(" Shaded cycles are stress windows, when a shock strikes more often.");
    }
    if shown.len() < d.arms.len() {
        caption.push_str(&format!(
            " {} of {} arms are drawn, to keep the lines legible: the baseline, the arms with the highest repayment, \
             the lowest and highest loss and the most and fewest borrowers served, and arms from the middle of the list.",
            series.len(),
            d.arms.len()
        ));
    }
    Ok(Some(finish("cycles", title, caption, svg, marks)))
}

fn differences(d: &RunData) -> Result<Option<Chart>, BoardError> {
    let metrics: Vec<(&str, &str)> = [
        ("group_repayment_rate", "share of groups repaying in full"),
        ("loss_rate", "portfolio loss"),
        ("served_share", "borrower slots served"),
    ]
    .into_iter()
    .filter(|(m, _)| d.differences.iter().any(|r| r.metric == *m))
    .collect();
    let Some(baseline) = d.differences.first().map(|r| r.baseline.clone()) else {
        return Ok(None);
    };
    let rows: Vec<&ArmRow> = d
        .arms
        .iter()
        .filter(|a| a.label != baseline && d.differences.iter().any(|r| r.arm == a.label && r.baseline == baseline))
        .collect();
    if metrics.is_empty() || rows.is_empty() {
        return Ok(None);
    }
    let base_number = d
        .arms
        .iter()
        .find(|a| a.label == baseline)
        .map_or(String::new(), |a| format!("arm {} ", a.number));
    let title = format!("Each arm against the baseline, {base_number}({})", short(&baseline, 50));
    let entries = vec![
        LegendEntry::mark(
            "difference; interval excludes zero",
            SERIES[0].color,
            Marker::Circle,
            false,
        ),
        LegendEntry::mark(
            "difference; interval includes zero",
            SERIES[0].color,
            Marker::Circle,
            true,
        ),
        LegendEntry::line("95% confidence interval, paired by replication", INK, None),
    ];
    let legend_h = style::legend_height(&entries, WIDTH);
    let (label_w, chars) = label_column(d);
    let row_h = 28;
    let n = rows.len();
    let title_h = 44;
    let plot_h = n as i32 * row_h + 60 + 40;
    let height = title_h + plot_h + legend_h;
    let mut marks = Marks::default();
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (WIDTH as u32, height as u32)).into_drawing_area();
        root.fill(&WHITE)?;
        root.draw(&Text::new(
            title.clone(),
            (WIDTH / 2, 14),
            font(TITLE_FONT).pos(Pos::new(HPos::Center, VPos::Top)),
        ))?;
        let (body, legend_area) = root.split_vertically(height - legend_h);
        let (_, body) = body.split_vertically(title_h);
        let (_, panels_area) = body.split_horizontally(label_w);
        let panels = panels_area.split_evenly((1, metrics.len()));
        for (p, ((metric, words), area)) in metrics.iter().zip(panels.iter()).enumerate() {
            let found: Vec<(usize, &super::input::DiffRow)> = rows
                .iter()
                .enumerate()
                .filter_map(|(i, a)| {
                    d.differences
                        .iter()
                        .find(|r| r.arm == a.label && r.metric == *metric && r.baseline == baseline)
                        .map(|r| (i, r))
                })
                .collect();
            let values = found.iter().flat_map(|(_, r)| {
                let (lo, hi) = r.ci.unwrap_or((r.difference, r.difference));
                [0.0, r.difference * 100.0, lo * 100.0, hi * 100.0]
            });
            let (x0, x1) = padded(values, 0.12, false, None);
            let mut chart = ChartBuilder::on(area)
                .caption(*words, font(DESC_FONT))
                .margin_left(10)
                .margin_right(22)
                .margin_top(6)
                .x_label_area_size(60)
                .y_label_area_size(0)
                .build_cartesian_2d(x0..x1, -0.6..(n as f64 - 0.4))?;
            // As many tick labels as the panel's width holds without collisions.
            let width = chart.plotting_area().dim_in_pixel().0 as f64;
            let ticks = ((width / 55.0).floor() as usize).clamp(3, 8);
            let dec = step_decimals((x1 - x0) / ticks as f64);
            chart
                .configure_mesh()
                .disable_y_mesh()
                .y_labels(0)
                .x_labels(ticks)
                .x_label_formatter(&|v| signed(*v, dec))
                .x_desc("difference, percentage points")
                .axis_desc_style(font(DESC_FONT))
                .label_style(font(TICK_FONT))
                .bold_line_style(GRID)
                .light_line_style(WHITE)
                .axis_style(MUTED)
                .draw()?;
            let plot = chart.plotting_area().clone();
            for (i, arm) in rows.iter().enumerate() {
                let y = (n - 1 - i) as f64;
                if i % 2 == 1 {
                    plot.draw(&Rectangle::new([(x0, y - 0.5), (x1, y + 0.5)], ROW.filled()))?;
                }
                if p == 0 {
                    let (px, py) = chart.backend_coord(&(x0, y));
                    root.draw(&Text::new(
                        row_label(arm, chars),
                        (px - 20, py),
                        font(TICK_FONT).pos(Pos::new(HPos::Right, VPos::Center)),
                    ))?;
                }
            }
            plot.draw(&PathElement::new(
                vec![(0.0, -0.6), (0.0, n as f64 - 0.4)],
                INK.stroke_width(1),
            ))?;
            for (i, r) in &found {
                let y = (n - 1 - i) as f64;
                let v = r.difference * 100.0;
                let significant = r
                    .significant
                    .or(r.ci.map(|(lo, hi)| lo > 0.0 || hi < 0.0))
                    .unwrap_or(false);
                if let Some((lo, hi)) = r.ci {
                    plot.draw(&PathElement::new(
                        vec![(lo * 100.0, y), (hi * 100.0, y)],
                        INK.stroke_width(2),
                    ))?;
                    for e in [lo, hi] {
                        plot.draw(
                            &(EmptyElement::at((e * 100.0, y))
                                + PathElement::new(vec![(0, -6), (0, 6)], INK.stroke_width(2))),
                        )?;
                    }
                }
                style::marker(&plot, (v, y), Marker::Circle, SERIES[0].color, !significant, 6)?;
                let ci = r.ci.map_or(String::new(), |(l, h)| {
                    format!(" (95% CI {:+.2} to {:+.2})", l * 100.0, h * 100.0)
                });
                marks.add(
                    chart.backend_coord(&(v, y)),
                    'x',
                    (&r.arm, metric),
                    r.difference,
                    &[("baseline", baseline.clone()), ("significant", significant.to_string())],
                    &format!(
                        "{} against {}: {words} {:+.2} percentage points{ci}",
                        r.arm, baseline, v
                    ),
                );
            }
        }
        style::legend(&legend_area, &entries)?;
        root.present()?;
    }
    let caption = format!(
        "How much each arm changes each figure compared with the baseline ({baseline}), in percentage points. Every arm \
         of a replication meets the same shocks, so the comparison is paired and its intervals are much narrower than \
         separate intervals would suggest. A filled marker means the 95% interval excludes zero: a difference the \
         simulation can tell apart from chance."
    );
    Ok(Some(finish("differences", title, caption, svg, marks)))
}

/// Frontier flags: the run's own when every arm has one, else computed from loss and served share.
pub fn frontier_flags(arms: &[ArmRow]) -> Vec<bool> {
    if arms.iter().all(|a| a.on_frontier.is_some()) {
        return arms.iter().map(|a| a.on_frontier == Some(true)).collect();
    }
    arms.iter()
        .map(|a| match (a.loss, a.served) {
            (Some(l), Some(s)) => !arms.iter().any(|b| match (b.loss, b.served) {
                (Some(lb), Some(sb)) => lb <= l && sb >= s && (lb < l || sb > s),
                _ => false,
            }),
            _ => false,
        })
        .collect()
}

fn frontier(d: &RunData) -> Result<Option<Chart>, BoardError> {
    let flags = frontier_flags(&d.arms);
    let points: Vec<(&ArmRow, bool, f64, f64)> = d
        .arms
        .iter()
        .zip(&flags)
        .filter_map(|(a, f)| Some((a, *f, a.served? * 100.0, a.loss? * 100.0)))
        .collect();
    if points.is_empty() {
        return Ok(None);
    }
    let title = "Loss against outreach: the arms no other arm beats on both".to_string();
    let entries = vec![
        LegendEntry::series("on the frontier: no arm serves more and loses less", SERIES[0]),
        LegendEntry::mark("another arm does better on both", MUTED, Marker::Circle, true),
    ];
    let legend_h = style::legend_height(&entries, WIDTH);
    let height = 620 + legend_h;
    let (x0, x1) = padded(points.iter().map(|p| p.2), 0.12, true, Some(100.0));
    let (y0, y1) = padded(points.iter().map(|p| p.3), 0.15, true, None);
    let mut marks = Marks::default();
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (WIDTH as u32, height as u32)).into_drawing_area();
        root.fill(&WHITE)?;
        let (top, legend_area) = root.split_vertically(height - legend_h);
        let mut chart = ChartBuilder::on(&top)
            .caption(&title, font(TITLE_FONT))
            .margin(18)
            .margin_right(34)
            .x_label_area_size(64)
            .y_label_area_size(84)
            .build_cartesian_2d(x0..x1, y0..y1)?;
        let (dx, dy) = (decimals(x1 - x0), decimals(y1 - y0));
        chart
            .configure_mesh()
            .x_labels(8)
            .y_labels(8)
            .x_label_formatter(&|v| format!("{v:.dx$}"))
            .y_label_formatter(&|v| format!("{v:.dy$}"))
            .x_desc("borrower slots served, % (mean over cycles)")
            .y_desc("portfolio loss, % of amount lent")
            .axis_desc_style(font(DESC_FONT))
            .label_style(font(TICK_FONT))
            .bold_line_style(GRID)
            .light_line_style(WHITE)
            .axis_style(MUTED)
            .draw()?;
        let plot = chart.plotting_area().clone();
        let mut front: Vec<(f64, f64)> = points.iter().filter(|p| p.1).map(|p| (p.2, p.3)).collect();
        front.sort_by(|a, b| a.0.total_cmp(&b.0));
        if front.len() > 1 {
            style::line(&plot, front, SERIES[0].color, 2, SERIES[0].dash)?;
        }
        for (a, on, x, y) in &points {
            let (color, hollow) = if *on { (SERIES[0].color, false) } else { (MUTED, true) };
            style::marker(&plot, (*x, *y), Marker::Circle, color, hollow, 7)?;
            let px = chart.backend_coord(&(*x, *y));
            let extra = [("frontier", on.to_string())];
            let tip = format!(
                "{} {}: serves {:.2}% of slots, loses {:.2}% of the amount lent{}",
                a.number,
                a.label,
                x,
                y,
                if *on { "; on the frontier" } else { "" }
            );
            marks.add(px, 'x', (&a.label, "served_share"), x / 100.0, &extra, &tip);
            marks.add(px, 'y', (&a.label, "loss_rate"), y / 100.0, &extra, &tip);
        }
        // Number labels placed where they overlap neither another label nor a marker.
        let pixels: Vec<(i32, i32)> = points.iter().map(|p| chart.backend_coord(&(p.2, p.3))).collect();
        let (left, top_px) = chart.backend_coord(&(x0, y1));
        let (right, bottom) = chart.backend_coord(&(x1, y0));
        let mut taken: Vec<(i32, i32, i32, i32)> = pixels.iter().map(|&(x, y)| (x - 8, y - 8, x + 8, y + 8)).collect();
        let overlaps = |b: &(i32, i32, i32, i32), boxes: &[(i32, i32, i32, i32)]| {
            boxes.iter().any(|o| b.0 < o.2 && o.0 < b.2 && b.1 < o.3 && o.1 < b.3)
        };
        for ((a, on, _, _), &(px, py)) in points.iter().zip(&pixels) {
            let text = a.number.to_string();
            let w = style::text_width(&text, 15) + 2;
            let h = 16;
            let candidates = [
                (10, -20),
                (10, 4),
                (-10 - w, -20),
                (-10 - w, 4),
                (-w / 2, -28),
                (-w / 2, 12),
                (18, -8),
                (-18 - w, -8),
            ];
            let fits = |(ox, oy): (i32, i32)| {
                let b = (px + ox, py + oy, px + ox + w, py + oy + h);
                (b.0 >= left && b.2 <= right && b.1 >= top_px && b.3 <= bottom && !overlaps(&b, &taken)).then_some(b)
            };
            // A crowded dominated arm goes unlabelled rather than covering another label: its hover
            // text and the summary table still name it. Frontier arms are always labelled.
            let chosen = match candidates.iter().find_map(|&c| fits(c)) {
                Some(b) => b,
                None if *on => (px + 10, py - 20, px + 10 + w, py - 4),
                None => continue,
            };
            taken.push(chosen);
            let color = if *on { INK } else { MUTED };
            root.draw(&Text::new(
                text,
                (chosen.0 + 1, chosen.1),
                TextStyle::from((FONT, 15).into_font()).color(&color),
            ))?;
        }
        root.draw(&Text::new(
            "better: more served, less lost ↘".to_string(),
            (right - 8, bottom - 10),
            font(14).pos(Pos::new(HPos::Right, VPos::Bottom)),
        ))?;
        style::legend(&legend_area, &entries)?;
        root.present()?;
    }
    let caption = "Each marker is one arm, numbered as in the summary table: across, the share of borrower slots \
        served; up, the loss as a share of the amount lent. Filled markers joined by the line form the frontier: for \
        each of them, no other arm both serves more borrowers and loses less. Choosing among them is a trade-off \
        between outreach and loss; an arm off the frontier is beaten on both. Where markers crowd, some arms off the \
        frontier go unnumbered; hovering over a marker names its arm."
        .to_string();
    Ok(Some(finish("frontier", title, caption, svg, marks)))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quantile_needs_enough_values() {
        let v: Vec<f64> = (1..=100).map(f64::from).collect();
        assert_eq!(quantile(&v, 0.5), Some(50.5));
        assert!(quantile(&v, 0.99).is_some());
        assert!(quantile(&v, 0.999).is_none());
    }

    #[test]
    fn escape_covers_markup() {
        assert_eq!(escape("a<b & \"c\""), "a&lt;b &amp; &quot;c&quot;");
    }
}
