//! JUnit XML through quick-junit: one testsuite per run (fixture), one
//! testcase per step, failures and errors with the message, the script
//! line and the frame; measurements as the suite's properties
//! (`measure.NAME` = value, and `measure.NAME.verdict`). The
//! testsuite/testcase/failure/error/skipped/system-out shape is the one
//! CI servers read (common practice; no published standard).

use quick_junit::{NonSuccessKind, Property, Report, TestCase, TestCaseStatus, TestSuite};

use super::{RunReport, Status};

/// The XML document for `runs`, named `name`.
pub fn render(runs: &[RunReport], name: &str) -> std::io::Result<Vec<u8>> {
    let mut report = Report::new(name);
    for run in runs {
        report.add_test_suite(suite(run));
    }
    report.to_string().map(String::into_bytes).map_err(std::io::Error::other)
}

fn suite(run: &RunReport) -> TestSuite {
    let mut s = TestSuite::new(run.name.as_str());
    s.set_time(run.wall);
    s.add_property(Property::new("script", run.script.as_str()));
    s.add_property(Property::new("adapter", run.adapter.as_str()));
    if let Some(id) = &run.adapter_identity {
        s.add_property(Property::new("adapter.identity", id.as_str()));
    }
    if let Some(t) = &run.trace {
        s.add_property(Property::new("trace", t.display().to_string()));
    }
    for (k, v) in &run.parameters {
        s.add_property(Property::new(format!("param.{k}"), v.as_str()));
    }
    for m in &run.measurements {
        let unit = m.unit.as_deref().map(|u| format!(" {u}")).unwrap_or_default();
        s.add_property(Property::new(format!("measure.{}", m.name), format!("{}{unit}", m.value)));
        s.add_property(Property::new(
            format!("measure.{}.verdict", m.name),
            if m.passed { "within limits" } else { "out of limits" },
        ));
    }
    for (i, g) in run.guarded_writes.iter().enumerate() {
        s.add_property(Property::new(format!("guarded_write.{}", i + 1), g.to_string()));
    }
    if let Some(w) = &run.dry_run_writes {
        s.add_property(Property::new("dry_run.writes", w.len().to_string()));
    }
    for step in &run.steps {
        let status = match step.status {
            Status::Passed => TestCaseStatus::success(),
            Status::Skipped => {
                let mut st = TestCaseStatus::skipped();
                if let Some(m) = &step.message {
                    st.set_message(m.as_str());
                }
                st
            }
            Status::Failed | Status::Error => {
                let kind = if step.status == Status::Failed { NonSuccessKind::Failure } else { NonSuccessKind::Error };
                let mut st = TestCaseStatus::non_success(kind);
                st.set_message(step.message.as_deref().unwrap_or(step.status.word()));
                st.set_type(step.status.word());
                let mut detail = Vec::new();
                if let Some(o) = &step.origin {
                    detail.push(format!("at {o}"));
                }
                if let Some(f) = step.failed_at_frame {
                    detail.push(format!("last frame #{f}"));
                }
                if !detail.is_empty() {
                    st.set_description(detail.join(", "));
                }
                st
            }
        };
        let mut case = TestCase::new(step.name.as_str(), status);
        case.set_classname(run.name.as_str());
        case.set_time(step.duration);
        if let Some((a, b)) = step.frames {
            case.set_system_out(format!("frames #{a} to #{b}"));
        }
        s.add_test_case(case);
    }
    s.set_system_out(run.summary_line());
    s
}
