//! The renderings of a report: JUnit XML with one test case per check, a Markdown table, and
//! JSON that reads back.

use mixgauge_engine::{CovarianceForm, ModelDocument, Rows};
use mixgauge_gate::{GateReport, Limits, Profile, check, render};
use mixgauge_testkit::{Sampler, spaced};

fn report(shift: f64) -> GateReport {
    let truth = spaced(2, 3, CovarianceForm::Diagonal, 3, 6.0);
    let reference = Sampler::new(1).rows(&truth, 4_000);
    let rows = Rows::new(&reference, 3).unwrap();
    let names = vec!["a&b".to_string(), "<c>".to_string(), "d|e".to_string()];
    let profile = Profile::from_model(ModelDocument::from_mixture(&truth), &rows, &names).unwrap();
    let mut batch = Sampler::new(2).rows(&truth, 1_000);
    batch.iter_mut().step_by(3).for_each(|x| *x += shift);
    check(&profile, &Rows::new(&batch, 3).unwrap(), &Limits::default()).unwrap()
}

#[test]
fn junit_has_one_case_per_check_and_a_failure_for_each_failed_one() {
    let r = report(3.0);
    let xml = render::junit(&r);
    assert!(xml.starts_with("<?xml"));
    assert_eq!(xml.matches("<testcase ").count(), r.checks.len());
    let failed = r
        .checks
        .iter()
        .filter(|c| c.verdict == mixgauge_gate::Verdict::Fail)
        .count();
    assert!(failed >= 1);
    assert_eq!(xml.matches("<failure ").count(), failed);
    // Column names with markup characters are escaped, never raw.
    assert!(!xml.contains("<c>") && !xml.contains("a&b"), "{xml}");
}

#[test]
fn markdown_is_a_table_with_a_row_per_check() {
    let r = report(0.0);
    let md = render::markdown(&r);
    let table: Vec<&str> = md.lines().filter(|l| l.starts_with('|')).collect();
    assert_eq!(table.len(), 2 + r.checks.len(), "{md}");
    let cells = table[0].matches('|').count();
    // Every row has as many unescaped separators as the header.
    for row in &table {
        assert_eq!(row.replace("\\|", "").matches('|').count(), cells, "{row}");
    }
}

#[test]
fn the_json_report_reads_back() {
    let r = report(0.5);
    let back: GateReport = serde_json::from_str(&render::json(&r)).unwrap();
    assert_eq!(back, r);
    assert!(render::text(&r).starts_with("gate: "));
}
