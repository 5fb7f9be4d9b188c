//! The report's colours, chosen for this report. Series that must be told apart differ in
//! lightness as well as hue (dark blue against light orange), and every chart also varies
//! marker shape or line dash, so no distinction rests on hue alone.

use plotters::style::RGBColor;

/// One colour, usable in plotters and in CSS.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) struct Colour(pub u8, pub u8, pub u8);

impl Colour {
    /// For plotters.
    pub(crate) fn rgb(self) -> RGBColor {
        RGBColor(self.0, self.1, self.2)
    }

    /// As `#rrggbb`.
    pub(crate) fn hex(self) -> String {
        format!("#{:02x}{:02x}{:02x}", self.0, self.1, self.2)
    }
}

/// Body text and marks that annotate (rings, guide lines).
pub(crate) const INK: Colour = Colour(0x1d, 0x27, 0x33);
/// Axis labels and secondary text.
pub(crate) const MUTED: Colour = Colour(0x5b, 0x67, 0x76);
/// Axis lines.
pub(crate) const AXIS: Colour = Colour(0x9a, 0xa4, 0xb0);
/// Grid lines.
pub(crate) const GRID: Colour = Colour(0xe4, 0xe8, 0xed);
/// Backgrounds of charts.
pub(crate) const PAPER: Colour = Colour(0xff, 0xff, 0xff);

/// Training log-likelihood (dark blue).
pub(crate) const TRAIN: Colour = Colour(0x23, 0x4f, 0x8e);
/// Held-out log-likelihood (orange, lighter than [`TRAIN`]).
pub(crate) const HELDOUT: Colour = Colour(0xdc, 0x7f, 0x1f);
/// The band between the two curves: the overfitting gap.
pub(crate) const GAP: Colour = Colour(0xf3, 0xc7, 0x97);

/// BIC (dark blue, solid, circles).
pub(crate) const BIC: Colour = Colour(0x23, 0x4f, 0x8e);
/// AIC (orange, dashed, triangles).
pub(crate) const AIC: Colour = Colour(0xdc, 0x7f, 0x1f);
/// ICL (reddish purple, dotted, squares).
pub(crate) const ICL: Colour = Colour(0xa3, 0x3f, 0x86);

/// Component colours of the model view, cycled when a model has more components (each
/// component is also numbered on the chart).
pub(crate) const COMPONENTS: [Colour; 8] = [
    Colour(0x23, 0x4f, 0x8e), // dark blue
    Colour(0xe0, 0x8a, 0x2a), // orange
    Colour(0x35, 0x9c, 0x84), // green-teal
    Colour(0xc2, 0x4f, 0x88), // rose
    Colour(0x6d, 0xae, 0xe0), // sky
    Colour(0x8a, 0x5a, 0x2e), // brown
    Colour(0xd9, 0xbf, 0x3a), // ochre
    Colour(0x6e, 0x6e, 0x78), // slate
];

/// The colour of component `k` (zero-based).
pub(crate) fn component(k: usize) -> Colour {
    COMPONENTS[k % COMPONENTS.len()]
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hex_is_lowercase_six_digits() {
        assert_eq!(Colour(0x0a, 0xbc, 0xff).hex(), "#0abcff");
        assert_eq!(component(9), COMPONENTS[1]);
    }
}
