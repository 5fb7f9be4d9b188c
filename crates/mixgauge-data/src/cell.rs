//! One value of the input as the readers hand it to the table builder.
//!
//! Readers classify each feature cell as missing, a number or text; the table
//! builder decides what each means for the chosen columns. Text numbers are
//! parsed with the standard library's correctly rounded `str::parse::<f64>`.

/// A single feature value from the input, borrowed from the input's bytes.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Cell<'a> {
    /// Nothing was given: an empty CSV field or a JSON `null`.
    Missing,
    /// A number, possibly non-finite (`NaN`, `inf`, or `1e400`, which
    /// overflows to infinity). `text` is how the input wrote it; it is empty
    /// when the input is binary and the value speaks for itself.
    Number { value: f64, text: &'a str },
    /// Anything that is not a number.
    Text(&'a str),
}

impl<'a> Cell<'a> {
    /// Classifies a text field (a CSV field).
    ///
    /// Surrounding whitespace is ignored; what remains is empty (missing) or
    /// is parsed by `str::parse::<f64>`, which accepts integers, decimals,
    /// exponents, a leading `+` or `-`, and `NaN`, `inf` and `infinity` in
    /// any letter case.
    pub(crate) fn from_text(field: &'a str) -> Cell<'a> {
        let text = field.trim();
        if text.is_empty() {
            return Cell::Missing;
        }
        match text.parse::<f64>() {
            Ok(value) => Cell::Number { value, text },
            Err(_) => Cell::Text(text),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn number(field: &str) -> f64 {
        match Cell::from_text(field) {
            Cell::Number { value, .. } => value,
            other => panic!("{field:?} gave {other:?}, expected a number"),
        }
    }

    #[test]
    fn accepts_common_number_spellings() {
        assert_eq!(number("42"), 42.0);
        assert_eq!(number("-7"), -7.0);
        assert_eq!(number("+3.5"), 3.5);
        assert_eq!(number(" 2.5 "), 2.5);
        assert_eq!(number("\t1e3"), 1000.0);
        assert_eq!(number("1E-2"), 0.01);
        assert_eq!(number(".5"), 0.5);
        assert_eq!(number("5."), 5.0);
        assert_eq!(number("-0").to_bits(), (-0.0f64).to_bits());
    }

    /// Limits of IEEE 754 binary64 (IEEE Std 754-2019, Table 3.5): the
    /// largest finite value, the smallest normal and the smallest subnormal
    /// must parse to exactly those values; a larger exponent overflows to
    /// infinity.
    #[test]
    fn binary64_limits() {
        assert_eq!(number("1.7976931348623157e308"), f64::MAX);
        assert_eq!(number("2.2250738585072014e-308"), f64::MIN_POSITIVE);
        assert_eq!(number("4.9406564584124654e-324").to_bits(), 1);
        assert!(number("1e308").is_finite());
        assert_eq!(number("1e400"), f64::INFINITY);
        assert_eq!(number("-1e400"), f64::NEG_INFINITY);
    }

    #[test]
    fn non_finite_spellings_are_numbers() {
        assert!(number("NaN").is_nan());
        assert!(number("nan").is_nan());
        assert_eq!(number("inf"), f64::INFINITY);
        assert_eq!(number("-inf"), f64::NEG_INFINITY);
        assert_eq!(number("Infinity"), f64::INFINITY);
    }

    #[test]
    fn text_and_missing() {
        assert_eq!(Cell::from_text(""), Cell::Missing);
        assert_eq!(Cell::from_text("   "), Cell::Missing);
        assert_eq!(Cell::from_text(" abc "), Cell::Text("abc"));
        assert_eq!(Cell::from_text("1,5"), Cell::Text("1,5"));
        assert_eq!(Cell::from_text("0x10"), Cell::Text("0x10"));
        assert_eq!(Cell::from_text("NA"), Cell::Text("NA"));
        assert_eq!(Cell::from_text("1 000"), Cell::Text("1 000"));
    }

    #[test]
    fn number_keeps_its_written_form() {
        assert_eq!(
            Cell::from_text(" 1e400 "),
            Cell::Number {
                value: f64::INFINITY,
                text: "1e400"
            }
        );
    }
}
