//! Text helpers shared by the page, the table and the charts: HTML escaping, number
//! formatting (with a true minus sign and a dash for values that are missing or not finite)
//! and the short labels of candidates and of lists of component counts.

use mixgauge_engine::CovarianceForm;
use mixgauge_select::Choice;

/// Escapes text for HTML element content and attribute values.
pub(crate) fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            other => out.push(other),
        }
    }
    out
}

/// `value` with `decimals` digits after the point, a typographic minus, and "—" when it is
/// not finite.
pub(crate) fn fixed(value: f64, decimals: usize) -> String {
    if !value.is_finite() {
        return "—".into();
    }
    let text = format!("{value:.decimals$}");
    // "-0.000" reads as a sign error; show it as zero.
    if text
        .trim_start_matches('-')
        .chars()
        .all(|c| c == '0' || c == '.')
    {
        return text.trim_start_matches('-').to_string();
    }
    text.replace('-', "\u{2212}")
}

/// Like [`fixed`] for an optional value.
pub(crate) fn maybe_fixed(value: Option<f64>, decimals: usize) -> String {
    value.map_or_else(|| "—".into(), |v| fixed(v, decimals))
}

/// Decimals that show a spread of `span` with about three significant steps.
pub(crate) fn decimals_for(span: f64) -> usize {
    if !(span.is_finite() && span > 0.0) {
        return 2;
    }
    let digits = 2.0 - span.log10().floor();
    digits.clamp(0.0, 6.0) as usize
}

/// "full, K = 3".
pub(crate) fn choice_label(form: CovarianceForm, components: usize) -> String {
    format!("{form}, K = {components}")
}

/// [`choice_label`] of a [`Choice`].
pub(crate) fn choice(c: &Choice) -> String {
    choice_label(c.covariance, c.components)
}

/// A list of component counts: "1–6" when it is a run of consecutive counts, else "2, 4, 8".
pub(crate) fn counts(list: &[usize]) -> String {
    match list {
        [] => "none".into(),
        [one] => one.to_string(),
        [first, .., last] if list.windows(2).all(|w| w[1] == w[0] + 1) => {
            format!("{first}–{last}")
        }
        _ => list
            .iter()
            .map(ToString::to_string)
            .collect::<Vec<_>>()
            .join(", "),
    }
}

/// A number in short scientific-or-plain form for settings (1e-6, 0.001, 1000).
pub(crate) fn compact(value: f64) -> String {
    if !value.is_finite() {
        return "—".into();
    }
    if value != 0.0 && (value.abs() < 1e-3 || value.abs() >= 1e6) {
        format!("{value:e}").replace('-', "\u{2212}")
    } else {
        format!("{value}").replace('-', "\u{2212}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn escaping_covers_markup_and_quotes() {
        assert_eq!(
            escape(r#"<a href="x">'&'</a>"#),
            "&lt;a href=&quot;x&quot;&gt;&#39;&amp;&#39;&lt;/a&gt;"
        );
    }

    #[test]
    fn numbers_use_a_true_minus_and_a_dash_for_missing() {
        assert_eq!(fixed(-2.5, 2), "\u{2212}2.50");
        assert_eq!(fixed(-0.0001, 2), "0.00");
        assert_eq!(fixed(f64::NAN, 2), "—");
        assert_eq!(maybe_fixed(None, 1), "—");
        assert_eq!(compact(1e-6), "1e\u{2212}6");
        assert_eq!(compact(1000.0), "1000");
    }

    #[test]
    fn decimals_follow_the_spread() {
        assert_eq!(decimals_for(500.0), 0);
        assert_eq!(decimals_for(1.2), 2);
        assert_eq!(decimals_for(0.05), 4);
        assert_eq!(decimals_for(0.0), 2);
    }

    #[test]
    fn count_lists_collapse_runs() {
        assert_eq!(counts(&[1, 2, 3, 4]), "1–4");
        assert_eq!(counts(&[2, 4, 8]), "2, 4, 8");
        assert_eq!(counts(&[5]), "5");
        assert_eq!(counts(&[]), "none");
    }
}
