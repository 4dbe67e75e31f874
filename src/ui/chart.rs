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

/// A Levey–Jennings chart of one control level.
#[component]
pub fn LeveyJenningsChart(
    /// The series to draw.
    series: LeveyJennings,
) -> impl IntoView {
    let title = series.title.clone();
    view! {
        <figure class="chart">
            {canvas_figure(series, title, (720, 240), "lj-chart", draw)}
            <p class="legend muted">"● accepted run · ○ warning · ✕ rejected run"</p>
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
