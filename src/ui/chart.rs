//! Drawing: plotters on an HTML canvas. Draws series the engine computed; no arithmetic
//! beyond placing them.

use leptos::html::Canvas;
use leptos::prelude::*;
use plotters::prelude::*;
use plotters_canvas::CanvasBackend;

use crate::engine::charts::{CurvePlot, LeveyJennings, Trend};
use crate::engine::qc::Decision;

/// Points and lines of the data.
const INK: RGBColor = RGBColor(20, 70, 140);
/// ±3 SD lines, acceptance limits and rejected runs.
const LIMIT_RED: RGBColor = RGBColor(190, 30, 30);

/// A canvas with a caption, drawn by `draw` once it is in the page.
fn canvas_figure<S: 'static>(
    series: S,
    title: String,
    size: (u32, u32),
    testid: &'static str,
    draw: fn(web_sys::HtmlCanvasElement, &S) -> Result<(), String>,
) -> impl IntoView {
    let canvas = NodeRef::<Canvas>::new();
    Effect::new(move |_| {
        if let Some(el) = canvas.get() {
            if let Err(e) = draw(el, &series) {
                leptos::logging::warn!("chart not drawn: {e}");
            }
        }
    });
    view! {
        <figcaption>{title}</figcaption>
        <canvas node_ref=canvas width=size.0 height=size.1 data-testid=testid></canvas>
    }
}

/// The Levey–Jennings canvas, and where its plotting area lies in it (the margins
/// `draw` gives plotters): left edge and width, in canvas pixels.
const LJ_SIZE: (u32, u32) = (720, 240);
const LJ_PLOT_LEFT: f64 = 8.0 + 56.0;
const LJ_PLOT_WIDTH: f64 = LJ_SIZE.0 as f64 - LJ_PLOT_LEFT - 8.0;

/// A Levey–Jennings chart of one control level. Each point explains itself in words:
/// under the pointer, when tapped, or with the arrow keys once the chart has focus;
/// the warned and rejected points are also listed beneath in words.
#[component]
pub fn LeveyJenningsChart(
    /// The series to draw.
    series: LeveyJennings,
) -> impl IntoView {
    let title = series.title.clone();
    let flagged: Vec<String> = series
        .notes
        .iter()
        .zip(&series.decisions)
        .filter(|(_, d)| **d != Decision::Accept)
        .map(|(n, _)| n.clone())
        .collect();
    let selected = RwSignal::new(None::<usize>);
    let for_pointer = StoredValue::new(series.clone());
    let (for_keys, for_note) = (series.points.len(), series.notes.clone());
    let pick = move |ev: leptos::ev::MouseEvent| {
        let Some(el) = ev
            .target()
            .and_then(|t| wasm_bindgen::JsCast::dyn_into::<web_sys::HtmlElement>(t).ok())
        else {
            return;
        };
        // The canvas may be drawn narrower than its pixels (a small screen).
        let scale = LJ_SIZE.0 as f64 / f64::from(el.client_width().max(1));
        let x = f64::from(ev.offset_x()) * scale;
        if let Some(k) = for_pointer.with_value(|s| s.point_at((x - LJ_PLOT_LEFT) / LJ_PLOT_WIDTH))
        {
            selected.set(Some(k));
        }
    };
    let keys = move |ev: leptos::ev::KeyboardEvent| {
        if for_keys == 0 {
            return;
        }
        let last = for_keys - 1;
        let next = match (ev.key().as_str(), selected.get_untracked()) {
            ("ArrowRight", None) | ("Home", _) => 0,
            ("ArrowLeft", None) | ("End", _) => last,
            ("ArrowRight", Some(k)) => (k + 1).min(last),
            ("ArrowLeft", Some(k)) => k.saturating_sub(1),
            _ => return,
        };
        ev.prevent_default();
        selected.set(Some(next));
    };
    let note = move || {
        selected
            .get()
            .and_then(|k| for_note.get(k).cloned())
            .unwrap_or_else(|| {
                "Point at a result, tap it, or focus the chart and use the arrow keys: it is \
                 explained here."
                    .to_string()
            })
    };
    let canvas = NodeRef::<Canvas>::new();
    Effect::new(move |_| {
        if let Some(el) = canvas.get() {
            if let Err(e) = draw(el, &series) {
                leptos::logging::warn!("chart not drawn: {e}");
            }
        }
    });
    view! {
        <figure class="chart">
            <figcaption>{title.clone()}</figcaption>
            <canvas node_ref=canvas width=LJ_SIZE.0 height=LJ_SIZE.1 data-testid="lj-chart"
                tabindex="0" aria-label=format!("{title}: use the arrow keys to read each result")
                on:mousemove=pick on:click=pick on:keydown=keys></canvas>
            <p class="point-note" aria-live="polite" data-testid="lj-point-note">{note}</p>
            <p class="legend muted">"● accepted run · ○ warning · ✕ rejected run"</p>
            {(!flagged.is_empty()).then(|| view! {
                <ul class="flagged" data-testid="lj-flagged">
                    {flagged.into_iter().map(|n| view! { <li>{n}</li> }).collect_view()}
                </ul>
            })}
        </figure>
    }
}

fn draw(el: web_sys::HtmlCanvasElement, s: &LeveyJennings) -> Result<(), String> {
    let backend = CanvasBackend::with_canvas_object(el).ok_or("no canvas context")?;
    let root = backend.into_drawing_area();
    root.fill(&WHITE).map_err(|e| e.to_string())?;
    let mut chart = ChartBuilder::on(&root)
        .margin(8)
        .x_label_area_size(36)
        .y_label_area_size(56)
        .build_cartesian_2d(0.0..(s.runs as f64 + 1.0), s.y_min..s.y_max)
        .map_err(|e| e.to_string())?;
    chart
        .configure_mesh()
        .disable_mesh()
        .x_labels(10)
        .x_label_formatter(&|x| s.x_label(*x))
        .x_desc("run")
        .y_labels(7)
        .draw()
        .map_err(|e| e.to_string())?;
    let x_end = s.runs as f64 + 1.0;
    for (k, y) in s.sd_lines() {
        let style = match k.abs() {
            0 => RGBColor(30, 30, 30).stroke_width(2),
            1 => RGBColor(170, 170, 170).stroke_width(1),
            2 => RGBColor(200, 140, 0).stroke_width(1),
            _ => LIMIT_RED.stroke_width(1),
        };
        chart
            .draw_series(LineSeries::new(vec![(0.0, y), (x_end, y)], style))
            .map_err(|e| e.to_string())?;
    }
    let ink = INK;
    chart
        .draw_series(LineSeries::new(
            s.points.iter().copied(),
            ink.stroke_width(1),
        ))
        .map_err(|e| e.to_string())?;
    // Accepted runs: filled circles; warnings: hollow amber circles; rejections: red
    // crosses (shape as well as colour).
    let amber = RGBColor(200, 130, 0);
    let red = LIMIT_RED;
    for (&p, d) in s.points.iter().zip(&s.decisions) {
        match d {
            Decision::Accept => chart.draw_series(std::iter::once(Circle::new(p, 3, ink.filled()))),
            Decision::Warning => {
                chart.draw_series(std::iter::once(Circle::new(p, 4, amber.stroke_width(2))))
            }
            Decision::Reject => {
                chart.draw_series(std::iter::once(Cross::new(p, 5, red.stroke_width(2))))
            }
        }
        .map_err(|e| e.to_string())?;
    }
    root.present().map_err(|e| e.to_string())?;
    Ok(())
}

/// A new calibration's curve through its calibrators, the last accepted curve dashed
/// beside it, and the residuals in a strip beneath.
#[component]
pub fn CurveChart(
    /// The series to draw.
    series: CurvePlot,
) -> impl IntoView {
    let title = series.title.clone();
    view! {
        <figure class="chart curve">
            {canvas_figure(series, title, (560, 340), "curve-chart", draw_curve)}
            <p class="legend muted">"● calibrator readings · — this fit · - - last accepted curve · below: residuals (signal − fit)"</p>
        </figure>
    }
}

fn draw_curve(el: web_sys::HtmlCanvasElement, s: &CurvePlot) -> Result<(), String> {
    let backend = CanvasBackend::with_canvas_object(el).ok_or("no canvas context")?;
    let root = backend.into_drawing_area();
    root.fill(&WHITE).map_err(|e| e.to_string())?;
    let (top, bottom) = root.split_vertically(240);
    let mut chart = ChartBuilder::on(&top)
        .margin(8)
        .x_label_area_size(24)
        .y_label_area_size(56)
        .build_cartesian_2d(0.0..s.x_max, s.y_min..s.y_max)
        .map_err(|e| e.to_string())?;
    chart
        .configure_mesh()
        .disable_mesh()
        .x_labels(8)
        .y_labels(6)
        .y_desc("net signal")
        .draw()
        .map_err(|e| e.to_string())?;
    let grey = RGBColor(120, 120, 120);
    for pair in s.previous.chunks(2) {
        if let [a, b] = pair {
            chart
                .draw_series(LineSeries::new(vec![*a, *b], grey.stroke_width(1)))
                .map_err(|e| e.to_string())?;
        }
    }
    chart
        .draw_series(LineSeries::new(
            s.curve.iter().copied(),
            INK.stroke_width(2),
        ))
        .map_err(|e| e.to_string())?;
    chart
        .draw_series(s.points.iter().map(|&p| Circle::new(p, 4, INK.filled())))
        .map_err(|e| e.to_string())?;
    let mut strip = ChartBuilder::on(&bottom)
        .margin(8)
        .x_label_area_size(24)
        .y_label_area_size(56)
        .build_cartesian_2d(0.0..s.x_max, -s.residual_max..s.residual_max)
        .map_err(|e| e.to_string())?;
    strip
        .configure_mesh()
        .disable_mesh()
        .x_labels(8)
        .y_labels(3)
        .x_desc("concentration")
        .draw()
        .map_err(|e| e.to_string())?;
    strip
        .draw_series(LineSeries::new(
            vec![(0.0, 0.0), (s.x_max, 0.0)],
            RGBColor(30, 30, 30).stroke_width(1),
        ))
        .map_err(|e| e.to_string())?;
    strip
        .draw_series(
            s.residuals
                .iter()
                .map(|&(x, r)| PathElement::new(vec![(x, 0.0), (x, r)], LIMIT_RED.stroke_width(2))),
        )
        .map_err(|e| e.to_string())?;
    strip
        .draw_series(
            s.residuals
                .iter()
                .map(|&p| Circle::new(p, 3, LIMIT_RED.filled())),
        )
        .map_err(|e| e.to_string())?;
    root.present().map_err(|e| e.to_string())?;
    Ok(())
}

/// A small line chart of a calibration trend.
#[component]
pub fn TrendChart(
    /// The series to draw.
    series: Trend,
) -> impl IntoView {
    let title = series.title.clone();
    view! {
        <figure class="chart trend">{canvas_figure(series, title, (360, 160), "trend-chart", draw_trend)}</figure>
    }
}

fn draw_trend(el: web_sys::HtmlCanvasElement, s: &Trend) -> Result<(), String> {
    let backend = CanvasBackend::with_canvas_object(el).ok_or("no canvas context")?;
    let root = backend.into_drawing_area();
    root.fill(&WHITE).map_err(|e| e.to_string())?;
    let x0 = s.points.first().map_or(1.0, |p| p.0) - 0.5;
    let x1 = s.points.last().map_or(1.0, |p| p.0) + 0.5;
    let mut chart = ChartBuilder::on(&root)
        .margin(6)
        .x_label_area_size(20)
        .y_label_area_size(56)
        .build_cartesian_2d(x0..x1, s.y_min..s.y_max)
        .map_err(|e| e.to_string())?;
    chart
        .configure_mesh()
        .disable_mesh()
        .x_labels(s.points.len().min(10))
        .x_label_formatter(&|x| format!("{x:.0}"))
        .y_labels(5)
        .draw()
        .map_err(|e| e.to_string())?;
    if let Some((lo, hi)) = s.range {
        let limit = LIMIT_RED.stroke_width(1);
        for y in [lo, hi] {
            chart
                .draw_series(LineSeries::new(vec![(x0, y), (x1, y)], limit))
                .map_err(|e| e.to_string())?;
        }
    }
    let ink = INK;
    chart
        .draw_series(LineSeries::new(
            s.points.iter().copied(),
            ink.stroke_width(1),
        ))
        .map_err(|e| e.to_string())?;
    chart
        .draw_series(s.points.iter().map(|&p| Circle::new(p, 3, ink.filled())))
        .map_err(|e| e.to_string())?;
    root.present().map_err(|e| e.to_string())?;
    Ok(())
}
