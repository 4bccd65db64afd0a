//! Snapshots of `scan` on every sample model, as text and JSON (regression guard for the report
//! format; the sites themselves are checked against outside references in tests/scan.rs).

use actswap::onnx::{Model, ModelIndex};
use actswap::report::scan_table;
use actswap::scan;

fn check(name: &str) {
    let path = format!("sample-models/{name}.onnx");
    let model = Model::load(std::path::Path::new(&path)).unwrap();
    let index = ModelIndex::build(&model).unwrap();
    let report = scan::scan(&index);
    let text = scan_table::render(&report);
    insta::assert_snapshot!(format!("{name}.txt"), text);
    // Off a terminal, the table written row by row is the table rendered whole.
    let mut streamed = Vec::new();
    scan_table::write(&mut streamed, &report).unwrap();
    assert_eq!(String::from_utf8(streamed).unwrap(), text);
    insta::assert_json_snapshot!(format!("{name}.json"), report);
}

#[test]
fn orchard_grader() {
    check("orchard-grader");
}

#[test]
fn pump_vibration() {
    check("pump-vibration");
}

#[test]
fn door_chime_keywords() {
    check("door-chime-keywords");
}

#[test]
fn greenhouse_climate() {
    check("greenhouse-climate");
}

#[test]
fn beehive_acoustics() {
    check("beehive-acoustics");
}
