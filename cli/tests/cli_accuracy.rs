//! `midge compare` accuracy tools end to end on the bundled int8 hard case
//! (models/caps/hard.toml, constructed on purpose; 12 validation images
//! per class to stay fast): --equalize, --sensitivity, and the automatic
//! mixed precision of --max-drop with --mixed-description (and the --html
//! page), whose written
//! description is compared again; refusals are one line, exit 2 or 3, and
//! nothing written.

#[path = "../../convert/tests/quant_support/mod.rs"]
mod quant_support;

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use quant_support::scratch;

fn midge(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_midge"))
        .args(args)
        .output()
        .expect("run midge")
}

fn text(b: &[u8]) -> String {
    String::from_utf8_lossy(b).into_owned()
}

fn p(path: &Path) -> &str {
    path.to_str().unwrap()
}

fn hard() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../models/caps/hard.toml")
}

/// The first `n` validation images of each class in a labelled folder.
fn few_images(dir: &Path, n: usize) -> PathBuf {
    let src = hard().parent().unwrap().join("val");
    let dst = dir.join("val");
    for label in ["sealed", "missing", "tilted", "torn"] {
        std::fs::create_dir_all(dst.join(label)).unwrap();
        let mut files: Vec<PathBuf> = std::fs::read_dir(src.join(label))
            .unwrap()
            .map(|e| e.unwrap().path())
            .collect();
        files.sort();
        for f in files.iter().take(n) {
            std::fs::copy(f, dst.join(label).join(f.file_name().unwrap())).unwrap();
        }
    }
    dst
}

fn json(o: &Output) -> serde_json::Value {
    assert!(
        o.status.success(),
        "status {:?}: {}",
        o.status,
        text(&o.stderr)
    );
    serde_json::from_slice(&o.stdout).expect("JSON")
}

fn one_line(o: &Output, status: i32, words: &[&str]) {
    assert_eq!(o.status.code(), Some(status), "{}", text(&o.stderr));
    let e = text(&o.stderr);
    assert_eq!(e.trim_end().lines().count(), 1, "{e}");
    for w in words {
        assert!(e.contains(w), "{w:?} not in {e}");
    }
}

#[test]
fn equalize_flag_reaches_the_report() {
    let dir = scratch("cli-acc-eq");
    let val = few_images(&dir, 12);
    let plain = json(&midge(&[
        "compare",
        p(&hard()),
        "--images",
        p(&val),
        "--json",
    ]));
    let eq = json(&midge(&[
        "compare",
        p(&hard()),
        "--images",
        p(&val),
        "--json",
        "--equalize",
        "--bias-correct",
    ]));
    assert!(plain["equalized"].as_array().unwrap().is_empty());
    let pairs = eq["equalized"].as_array().unwrap();
    assert!(
        pairs
            .iter()
            .any(|r| r["producer"] == "b0_dw" && r["consumer"] == "b0_pw"),
        "{pairs:?}"
    );
    assert!(!eq["bias_correction"].as_array().unwrap().is_empty());
    // Float top-1 is the same (equalization keeps the float function,
    // Nagel et al. 2019); the drop is smaller.
    assert_eq!(plain["float_top1"], eq["float_top1"]);
    let (d0, d1) = (
        plain["drop_pp"].as_f64().unwrap(),
        eq["drop_pp"].as_f64().unwrap(),
    );
    assert!(d1 < d0, "drop {d1} with the tools vs {d0} plain");
}

#[test]
fn mixed_description_meets_the_bound_when_compared_again() {
    let dir = scratch("cli-acc-mix");
    let val = few_images(&dir, 12);
    let dest = dir.join("out").join("hard-mixed.toml");
    let page = dir.join("out").join("hard.html");
    std::fs::create_dir_all(dest.parent().unwrap()).unwrap();
    let v = json(&midge(&[
        "compare",
        p(&hard()),
        "--images",
        p(&val),
        "--max-drop",
        "0.5",
        "--mixed-description",
        p(&dest),
        "--no-emulate",
        "--json",
        "--html",
        p(&page),
    ]));
    let html = std::fs::read_to_string(&page).unwrap();
    for w in [
        "<svg",
        "only this layer int8",
        "only this layer fp16",
        "b0_pw",
        "Mixed precision",
    ] {
        assert!(html.contains(w), "{w:?} not in the HTML page");
    }
    let plain_drop = v["report"]["drop_pp"].as_f64().unwrap();
    assert!(
        plain_drop > 0.5,
        "plain drop {plain_drop} pp: nothing to fix"
    );
    let mixed = &v["mixed"];
    assert_eq!(mixed["met"], true, "{mixed}");
    let fp16: Vec<&str> = mixed["fp16_layers"]
        .as_array()
        .unwrap()
        .iter()
        .map(|l| l.as_str().unwrap())
        .collect();
    assert!(!fp16.is_empty() && fp16.len() < 10, "{fp16:?}");
    // Every step carries its cost (flash and RAM counted, instructions
    // not, with the reason).
    for step in mixed["steps"].as_array().unwrap() {
        assert!(step["cost"]["model_bytes"].as_u64().unwrap() > 0);
        assert!(step["cost"]["workspace_len"].as_u64().unwrap() > 0);
        assert!(step["cost"]["instructions"].is_null());
    }
    // The sensitivity table names every folded layer once.
    assert_eq!(v["sensitivity"]["rows"].as_array().unwrap().len(), 10);

    // The written description holds the chosen precisions and, compared
    // again on the same images, meets the bound.
    let written = std::fs::read_to_string(&dest).unwrap();
    assert!(written.contains("precision = \"fp16\""), "{written}");
    let again = json(&midge(&[
        "compare",
        p(&dest),
        "--images",
        p(&val),
        "--max-drop",
        "0.5",
        "--json",
    ]));
    assert_eq!(again["precision"], "mixed");
    let d = again["drop_pp"].as_f64().unwrap();
    assert!(d <= 0.5, "mixed description drops {d} pp");
    let layers = again["layers"].as_array().unwrap();
    for l in &fp16 {
        let row = layers.iter().find(|r| r["name"] == *l).expect("layer row");
        assert_eq!(row["precision"], "fp16", "{l}");
    }
}

#[test]
fn refusals_are_one_line_and_write_nothing() {
    let dir = scratch("cli-acc-bad");
    let val = few_images(&dir, 3);
    // An unknown layer in --layers names it.
    let o = midge(&[
        "compare",
        p(&hard()),
        "--images",
        p(&val),
        "--sensitivity",
        "--layers",
        "b0_pw,nosuch",
    ]);
    one_line(&o, 2, &["--layers", "nosuch", "b0_pw"]);
    // A known subset gives exactly those rows.
    let v = json(&midge(&[
        "compare",
        p(&hard()),
        "--images",
        p(&val),
        "--sensitivity",
        "--layers",
        "fc,b0_pw",
        "--json",
    ]));
    let mut rows: Vec<&str> = v["sensitivity"]["rows"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r["layer"].as_str().unwrap())
        .collect();
    rows.sort();
    assert_eq!(rows, ["b0_pw", "fc"]);
    // A bound even all-fp16 misses: exit 3, no description.
    let dest = dir.join("never.toml");
    let o = midge(&[
        "compare",
        p(&hard()),
        "--images",
        p(&val),
        "--max-drop",
        "-50",
        "--mixed-description",
        p(&dest),
        "--no-emulate",
    ]);
    assert_eq!(o.status.code(), Some(3), "{}", text(&o.stderr));
    let e = text(&o.stderr);
    assert!(e.contains("all-fp16") && e.contains("-50"), "{e}");
    assert!(!dest.exists());
    // The description itself as the destination: refused before any work.
    let o = midge(&[
        "compare",
        p(&hard()),
        "--max-drop",
        "1",
        "--mixed-description",
        p(&hard()),
    ]);
    one_line(&o, 2, &["hard.toml"]);
    // A bound out of range.
    let o = midge(&[
        "compare",
        p(&hard()),
        "--max-drop",
        "500",
        "--mixed-description",
        p(&dest),
    ]);
    one_line(&o, 2, &["--max-drop", "500"]);
    assert!(!dest.exists());
}

#[test]
fn measured_calibration_reports_its_choice() {
    let dir = scratch("cli-acc-cal");
    let val = few_images(&dir, 3);
    let v = json(&midge(&[
        "compare",
        p(&hard()),
        "--images",
        p(&val),
        "--calibration-method",
        "measured",
        "--json",
    ]));
    let c = &v["calibration_choice"];
    // 100 calibration images (models/caps/README.md), one in four held apart.
    assert_eq!(c["held_images"], 25, "{c}");
    assert_eq!(c["fitted_images"], 75, "{c}");
    let per = c["per_method_db"].as_array().unwrap();
    assert_eq!(per.len(), 4, "{c}");
    let names: Vec<&str> = per.iter().map(|m| m[0].as_str().unwrap()).collect();
    assert!(names.contains(&c["model_method"].as_str().unwrap()), "{c}");
    // The kept choice scores at least as well as every whole-model method
    // on the held-apart images (it starts from the best and only accepts gains).
    let kept = c["final_db"].as_f64().unwrap();
    for m in per {
        assert!(kept >= m[1].as_f64().unwrap(), "{c}");
    }
    let out = dir.join("h.midge");
    let o = midge(&[
        "quantize",
        p(&hard()),
        "-o",
        p(&out),
        "--calibration-method",
        "measured",
    ]);
    assert!(o.status.success(), "{}", text(&o.stderr));
    let s = text(&o.stdout);
    assert!(
        s.contains("range method by measurement") && s.contains("kept:"),
        "{s}"
    );
    assert!(out.exists());
}
