//! The one colour scale of every heatmap in the app (the Flip matrix grid, the Sources
//! view's small multiples, the Compare view's confusion matrices), its key, and the text
//! colour that stays readable on each fill.
//!
//! Off the diagonal (the flips, or the errors of a confusion matrix) cells are coloured on
//! a sequential ramp whose luminance changes monotonically, from 0 to the largest flip
//! shown ([`FlipScale`]); the diagonal (labels kept, or recall) is grey on its own 0–1
//! scale, so that a 0.9 on the diagonal does not wash out a 0.03 beside it. The ramp is
//! read through a square root: flips differ by orders of magnitude, and the root keeps a
//! 2 % flip clearly apart from both 0 and a 20 % one while staying zero at zero (a log
//! scale would need an arbitrary floor).

use eframe::egui;
use ndarray::Array2;

/// The stops of the sequential ramp, from no flips to the largest flip: dark to bright on
/// the dark theme, light to dark on the light one (luminance monotone; tested).
const DARK_STOPS: [[f32; 3]; 5] = [
    [48.0, 48.0, 54.0],
    [60.0, 50.0, 120.0],
    [170.0, 60.0, 110.0],
    [240.0, 130.0, 60.0],
    [255.0, 235.0, 130.0],
];
const LIGHT_STOPS: [[f32; 3]; 5] = [
    [246.0, 246.0, 246.0],
    [252.0, 212.0, 160.0],
    [240.0, 120.0, 40.0],
    [170.0, 50.0, 20.0],
    [80.0, 15.0, 10.0],
];

/// The colour of a share `t` in [0, 1] of the ramp (clamped; not a number is 0).
pub fn ramp(t: f64, dark: bool) -> egui::Color32 {
    let stops = if dark { &DARK_STOPS } else { &LIGHT_STOPS };
    let t = unit(t) as f32;
    let x = t * (stops.len() - 1) as f32;
    let i = (x.floor() as usize).min(stops.len() - 2);
    let f = x - i as f32;
    let mix = |c: usize| (stops[i][c] + (stops[i + 1][c] - stops[i][c]) * f).round() as u8;
    egui::Color32::from_rgb(mix(0), mix(1), mix(2))
}

/// A diagonal cell: grey, lighter (dark theme) or darker (light theme) as more labels are
/// kept.
pub fn diagonal(value: f64, dark: bool) -> egui::Color32 {
    let v = unit(value) as f32;
    let level = if dark {
        70.0 + 110.0 * v
    } else {
        225.0 - 110.0 * v
    };
    egui::Color32::from_gray(level.round() as u8)
}

/// `v` clamped to [0, 1]; not a number is 0.
fn unit(v: f64) -> f64 {
    if v.is_finite() {
        v.clamp(0.0, 1.0)
    } else {
        0.0
    }
}

/// The top of the off-diagonal scale (the largest flip shown) and how a value maps onto
/// the ramp.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FlipScale {
    /// The value drawn in the ramp's last colour; never below [`FlipScale::FLOOR`].
    pub top: f64,
}

impl FlipScale {
    /// The smallest top: a matrix without flips still gets a scale.
    pub const FLOOR: f64 = 0.001;

    /// A scale reaching `top` (not a number, or below the floor, gives the floor).
    pub fn new(top: f64) -> FlipScale {
        let top = if top.is_finite() { top } else { 0.0 };
        FlipScale {
            top: top.max(Self::FLOOR),
        }
    }

    /// The largest off-diagonal cell of all `matrices`.
    pub fn of<'a>(matrices: impl IntoIterator<Item = &'a Array2<f64>>) -> FlipScale {
        FlipScale::new(flip_scale(matrices))
    }

    /// Where `v` sits on the ramp, in [0, 1] (square root; see the module doc).
    pub fn share(self, v: f64) -> f64 {
        unit(v / self.top).sqrt()
    }

    /// The value at share `t` of the ramp (the inverse of [`FlipScale::share`]).
    pub fn value_at(self, t: f64) -> f64 {
        self.top * unit(t).powi(2)
    }

    /// The fill of a cell holding `v`: grey on the diagonal, the ramp elsewhere.
    pub fn fill(self, v: f64, diagonal_cell: bool, dark: bool) -> egui::Color32 {
        if diagonal_cell {
            diagonal(v, dark)
        } else {
            ramp(self.share(v), dark)
        }
    }
}

/// The largest finite off-diagonal cell of all `matrices`; never below
/// [`FlipScale::FLOOR`].
pub fn flip_scale<'a>(matrices: impl IntoIterator<Item = &'a Array2<f64>>) -> f64 {
    matrices
        .into_iter()
        .flat_map(|m| {
            m.indexed_iter()
                .filter(|((i, j), _)| i != j)
                .map(|(_, &v)| v)
        })
        .filter(|v| v.is_finite())
        .fold(FlipScale::FLOOR, f64::max)
}

/// The relative luminance of an sRGB colour, by the formula of WCAG 2.x (W3C, Web
/// Content Accessibility Guidelines 2.1, definition "relative luminance"): each channel
/// linearised (c/12.92 up to 0.04045, else ((c+0.055)/1.055)^2.4), then weighted 0.2126,
/// 0.7152, 0.0722.
pub fn relative_luminance(c: egui::Color32) -> f64 {
    let lin = |v: u8| {
        let c = f64::from(v) / 255.0;
        if c <= 0.04045 {
            c / 12.92
        } else {
            ((c + 0.055) / 1.055).powf(2.4)
        }
    };
    0.2126 * lin(c.r()) + 0.7152 * lin(c.g()) + 0.0722 * lin(c.b())
}

/// The WCAG 2.x contrast ratio of two colours, (L1 + 0.05) / (L2 + 0.05) with L1 the
/// lighter; 1 to 21.
pub fn contrast(a: egui::Color32, b: egui::Color32) -> f64 {
    let (la, lb) = (relative_luminance(a), relative_luminance(b));
    (la.max(lb) + 0.05) / (la.min(lb) + 0.05)
}

/// Black or white, whichever contrasts more with `fill` (at least 4.58:1 for any fill,
/// above the 4.5:1 WCAG asks of body text).
pub fn text_on(fill: egui::Color32) -> egui::Color32 {
    let (black, white) = (egui::Color32::BLACK, egui::Color32::WHITE);
    if contrast(fill, black) >= contrast(fill, white) {
        black
    } else {
        white
    }
}

/// The key of a [`FlipScale`], drawn down the side of a heatmap: the ramp with five tick
/// values, and a grey swatch for the diagonal. `what` names the off-diagonal cells.
pub fn legend_vertical(ui: &mut egui::Ui, scale: FlipScale, what: &str, height: f32) {
    let dark = ui.visuals().dark_mode;
    ui.vertical(|ui| {
        ui.weak(what);
        let (rect, _) = ui.allocate_exact_size(egui::vec2(64.0, height), egui::Sense::hover());
        let bar = egui::Rect::from_min_size(rect.min, egui::vec2(14.0, height));
        gradient(ui, bar, dark, false);
        let text = ui.visuals().text_color();
        for t in TICKS {
            let y = bar.top() + (t as f32) * bar.height();
            let tick = [egui::pos2(bar.right(), y), egui::pos2(bar.right() + 4.0, y)];
            ui.painter()
                .line_segment(tick, egui::Stroke::new(1.0, text));
            ui.painter().text(
                egui::pos2(bar.right() + 6.0, y),
                egui::Align2::LEFT_CENTER,
                percent(scale.value_at(t)),
                egui::FontId::proportional(11.0),
                text,
            );
        }
        ui.add_space(6.0);
        diagonal_swatch(ui, dark, "diagonal");
    });
}

/// The key of a [`FlipScale`] in one line: the ramp with its tick values, and the
/// diagonal's grey.
pub fn legend_horizontal(ui: &mut egui::Ui, scale: FlipScale, what: &str) {
    let dark = ui.visuals().dark_mode;
    ui.horizontal(|ui| {
        ui.label(what);
        let (rect, _) = ui.allocate_exact_size(egui::vec2(180.0, 26.0), egui::Sense::hover());
        let bar = egui::Rect::from_min_size(rect.min, egui::vec2(rect.width(), 12.0));
        gradient(ui, bar, dark, true);
        let text = ui.visuals().text_color();
        for t in TICKS {
            let x = bar.left() + (t as f32) * bar.width();
            let align = match t {
                t if t <= 0.0 => egui::Align2::LEFT_TOP,
                t if t >= 1.0 => egui::Align2::RIGHT_TOP,
                _ => egui::Align2::CENTER_TOP,
            };
            ui.painter().text(
                egui::pos2(x, bar.bottom() + 1.0),
                align,
                percent(scale.value_at(t)),
                egui::FontId::proportional(10.0),
                text,
            );
        }
        ui.separator();
        diagonal_swatch(ui, dark, "diagonal: grey, 0–100 %");
    });
}

/// Where the keys put their tick values, as shares of the ramp.
const TICKS: [f64; 5] = [0.0, 0.25, 0.5, 0.75, 1.0];

/// A value as a percentage with the decimals its size needs.
fn percent(v: f64) -> String {
    let p = 100.0 * v;
    if p >= 10.0 || p == 0.0 {
        format!("{p:.0} %")
    } else if p >= 1.0 {
        format!("{p:.1} %")
    } else {
        format!("{p:.2} %")
    }
}

/// The ramp painted along `bar` (left to right, or top to bottom).
fn gradient(ui: &egui::Ui, bar: egui::Rect, dark: bool, across: bool) {
    let steps = 32;
    for s in 0..steps {
        let fill = ramp((s as f64 + 0.5) / steps as f64, dark);
        let (a, b) = (s as f32 / steps as f32, (s + 1) as f32 / steps as f32);
        let r = if across {
            egui::Rect::from_x_y_ranges(
                bar.lerp_inside([a, 0.0]).x..=bar.lerp_inside([b, 0.0]).x,
                bar.y_range(),
            )
        } else {
            egui::Rect::from_x_y_ranges(
                bar.x_range(),
                bar.lerp_inside([0.0, a]).y..=bar.lerp_inside([0.0, b]).y,
            )
        };
        ui.painter().rect_filled(r.expand(0.3), 0.0, fill);
    }
    let frame = ui.visuals().widgets.noninteractive.bg_stroke;
    ui.painter()
        .rect_stroke(bar, 0.0, frame, egui::StrokeKind::Outside);
}

/// A grey swatch for the diagonal, which has its own scale (0–100 %, lighter or darker
/// as more labels are kept).
fn diagonal_swatch(ui: &mut egui::Ui, dark: bool, text: &str) {
    ui.horizontal(|ui| {
        let (swatch, _) = ui.allocate_exact_size(egui::vec2(14.0, 14.0), egui::Sense::hover());
        ui.painter().rect_filled(swatch, 0.0, diagonal(0.6, dark));
        ui.weak(text).on_hover_text(
            "the diagonal (labels kept) is grey on its own 0–100 % scale, so that it does \
             not wash out the flips beside it",
        );
    });
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn the_shared_scale_is_the_largest_flip_of_any_matrix() {
        let a = array![[0.9, 0.1], [0.02, 0.98]];
        let b = array![[0.7, 0.3], [f64::NAN, 1.0]];
        assert_eq!(flip_scale([&a, &b]), 0.3);
        assert_eq!(flip_scale([&Array2::eye(3)]), FlipScale::FLOOR);
        assert_eq!(FlipScale::new(f64::NAN).top, FlipScale::FLOOR);
        assert_eq!(FlipScale::of([&a]).top, 0.1);
    }

    #[test]
    fn the_ramp_runs_from_its_first_to_its_last_stop_and_clamps() {
        let c = |s: [f32; 3]| egui::Color32::from_rgb(s[0] as u8, s[1] as u8, s[2] as u8);
        assert_eq!(ramp(0.0, true), c(DARK_STOPS[0]));
        assert_eq!(ramp(1.0, true), c(DARK_STOPS[4]));
        assert_eq!(ramp(7.0, false), c(LIGHT_STOPS[4]));
        assert_eq!(ramp(f64::NAN, false), c(LIGHT_STOPS[0]));
    }

    #[test]
    fn larger_flips_move_monotonically_in_luminance_away_from_the_background() {
        for dark in [true, false] {
            let scale = FlipScale::new(0.2);
            let lum: Vec<f64> = (0..=200)
                .map(|n| relative_luminance(scale.fill(n as f64 / 1000.0, false, dark)))
                .collect();
            for w in lum.windows(2) {
                let step = if dark { w[1] - w[0] } else { w[0] - w[1] };
                assert!(step >= -1e-3, "dark {dark}: luminance turns back: {w:?}");
            }
            // 2 % and 20 % look clearly different under a 20 % top: far apart in luminance.
            let (two, twenty) = (lum[20], lum[200]);
            assert!((two - twenty).abs() > 0.3, "dark {dark}: {two} vs {twenty}");
            let (zero, two) = (lum[0], lum[20]);
            assert!(
                (zero - two).abs() > 0.02,
                "dark {dark}: 0 vs 2 %: {zero} {two}"
            );
        }
    }

    #[test]
    fn the_square_root_scale_inverts_and_stays_in_range() {
        let s = FlipScale::new(0.2);
        assert!((s.share(0.05) - 0.5).abs() < 1e-12);
        assert!((s.value_at(s.share(0.013)) - 0.013).abs() < 1e-12);
        assert_eq!(s.share(5.0), 1.0);
        assert_eq!(s.share(-1.0), 0.0);
        assert_eq!(s.share(f64::NAN), 0.0);
    }

    #[test]
    fn wcag_luminance_and_contrast_match_the_formula_at_known_points() {
        use egui::Color32 as C;
        assert!((relative_luminance(C::WHITE) - 1.0).abs() < 1e-12);
        assert_eq!(relative_luminance(C::BLACK), 0.0);
        assert!((contrast(C::WHITE, C::BLACK) - 21.0).abs() < 1e-9);
        // sRGB 119 is linear 0.1845 (≈ 4.48:1 on white, the classic just-failing grey).
        let grey = C::from_gray(119);
        assert!((relative_luminance(grey) - 0.1845).abs() < 1e-3);
        assert!((contrast(grey, C::WHITE) - 4.48).abs() < 0.01);
    }

    #[test]
    fn every_fill_of_both_themes_gets_text_of_at_least_4_5_to_1() {
        for dark in [true, false] {
            let scale = FlipScale::new(0.3);
            for n in 0..=300 {
                let v = n as f64 / 1000.0;
                for fill in [scale.fill(v, false, dark), scale.fill(3.0 * v, true, dark)] {
                    let text = text_on(fill);
                    let ratio = contrast(fill, text);
                    assert!(ratio >= 4.5, "dark {dark}, {fill:?} with {text:?}: {ratio}");
                }
            }
        }
        // The pick itself: white on the darkest stop, black on the brightest.
        assert_eq!(text_on(ramp(0.0, true)), egui::Color32::WHITE);
        assert_eq!(text_on(ramp(1.0, true)), egui::Color32::BLACK);
        assert_eq!(text_on(ramp(0.0, false)), egui::Color32::BLACK);
        assert_eq!(text_on(ramp(1.0, false)), egui::Color32::WHITE);
    }
}
