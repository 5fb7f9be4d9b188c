//! A [`GateReport`] for people and for CI systems: plain text, JSON, JUnit XML (one test case
//! per check, so CI shows each) and a Markdown table for a pull-request comment.

use crate::check::{Check, GateReport, Verdict};

fn word(v: Verdict) -> &'static str {
    match v {
        Verdict::Pass => "pass",
        Verdict::Fail => "FAIL",
    }
}

fn p_text(c: &Check) -> String {
    c.p_value
        .map_or_else(|| "—".to_string(), |p| format!("{p:.3e}"))
}

/// Plain text, one line per check.
pub fn text(r: &GateReport) -> String {
    let mut s = format!(
        "gate: {} — {} batch rows against {} reference rows under {}\n",
        word(r.verdict),
        r.batch_rows,
        r.reference_rows,
        r.reference_model
    );
    for c in &r.checks {
        s.push_str(&format!(
            "  {:<5} {:<13} {}\n",
            word(c.verdict),
            c.name,
            c.message
        ));
        if let Some(p) = c.p_value {
            s.push_str(&format!(
                "        {} (p = {p:.3e}; limit {})\n",
                c.method, c.limit
            ));
        } else {
            s.push_str(&format!("        {} (limit {})\n", c.method, c.limit));
        }
    }
    s
}

/// The report as pretty JSON.
pub fn json(r: &GateReport) -> String {
    serde_json::to_string_pretty(r).expect("a report serialises")
}

fn xml_escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for ch in s.chars() {
        match ch {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&apos;"),
            c if (c as u32) < 0x20 && c != '\n' && c != '\t' => {}
            c => out.push(c),
        }
    }
    out
}

/// JUnit XML: one `<testsuite>` with one `<testcase>` per check; a failed check carries a
/// `<failure>` with its message.
pub fn junit(r: &GateReport) -> String {
    let failures = r
        .checks
        .iter()
        .filter(|c| c.verdict == Verdict::Fail)
        .count();
    let mut s = String::from("<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n");
    s.push_str(&format!(
        "<testsuites name=\"mixgauge gate\" tests=\"{}\" failures=\"{failures}\">\n",
        r.checks.len()
    ));
    s.push_str(&format!(
        "  <testsuite name=\"{}\" tests=\"{}\" failures=\"{failures}\" errors=\"0\" skipped=\"0\">\n",
        xml_escape(&format!("batch of {} rows vs {}", r.batch_rows, r.reference_model)),
        r.checks.len()
    ));
    for c in &r.checks {
        s.push_str(&format!(
            "    <testcase classname=\"mixgauge.gate\" name=\"{}\">\n",
            xml_escape(&c.name)
        ));
        let detail = format!(
            "{} — {}; statistic {:.4}, p {}, effect {:.4}; limit {}",
            c.message,
            c.method,
            c.statistic,
            p_text(c),
            c.effect,
            c.limit
        );
        if c.verdict == Verdict::Fail {
            s.push_str(&format!(
                "      <failure message=\"{}\">{}</failure>\n",
                xml_escape(&c.message),
                xml_escape(&detail)
            ));
        } else {
            s.push_str(&format!(
                "      <system-out>{}</system-out>\n",
                xml_escape(&detail)
            ));
        }
        s.push_str("    </testcase>\n");
    }
    s.push_str("  </testsuite>\n</testsuites>\n");
    s
}

fn md_cell(s: &str) -> String {
    s.replace('|', "\\|").replace('\n', " ")
}

/// A Markdown summary line and a table with one row per check.
pub fn markdown(r: &GateReport) -> String {
    let mut s = format!(
        "**mixgauge gate: {}** — {} batch rows against {} reference rows under {}\n\n",
        if r.verdict == Verdict::Pass {
            "pass"
        } else {
            "fail"
        },
        r.batch_rows,
        r.reference_rows,
        md_cell(&r.reference_model)
    );
    s.push_str("| check | verdict | method | statistic | p-value | effect | finding |\n");
    s.push_str("|---|---|---|---:|---:|---:|---|\n");
    for c in &r.checks {
        s.push_str(&format!(
            "| {} | {} | {} | {:.4} | {} | {:.4} | {} |\n",
            md_cell(&c.name),
            word(c.verdict),
            md_cell(&c.method),
            c.statistic,
            p_text(c),
            c.effect,
            md_cell(&c.message)
        ));
    }
    s
}
