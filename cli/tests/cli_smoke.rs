//! The `midge` binary end to end on a tiny model written by the test:
//! quantize (with a Rust module), show, classify, compare (table, JSON,
//! --max-drop), --help everywhere, and bad input → status 2, one stderr
//! line, no output file.

#[path = "../../convert/tests/quant_support/mod.rs"]
mod quant_support;

use std::path::Path;
use std::process::{Command, Output};

use quant_support::*;

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

#[test]
fn quantize_show_classify() {
    let dir = scratch("cli-q");
    let desc = write_model(&dir, "", 4);
    let out = dir.join("out").join("tiny.midge");
    std::fs::create_dir_all(dir.join("out")).unwrap();
    let module = dir.join("out").join("model.rs");
    let o = midge(&[
        "quantize",
        p(&desc),
        "-o",
        p(&out),
        "--rust-module",
        p(&module),
        "--calibration-method",
        "mse",
    ]);
    assert!(o.status.success(), "{}", text(&o.stderr));
    let s = text(&o.stdout);
    assert!(s.contains("workspace") && s.contains("lower bound"), "{s}");
    assert!(out.exists());
    let m = std::fs::read_to_string(&module).unwrap();
    assert!(
        m.contains("embed_model!(\"tiny.midge\")") && m.contains("WORKSPACE_LEN"),
        "{m}"
    );
    assert!(m.contains("INPUT_SHAPE: [usize; 3] = [8, 8, 3]"), "{m}");

    let o = midge(&["show", p(&out)]);
    assert!(o.status.success(), "{}", text(&o.stderr));
    let s = text(&o.stdout);
    for word in [
        "pixels",
        "conv2d",
        "depthwise",
        "add",
        "dense",
        "memory plan",
    ] {
        assert!(s.contains(word), "{word} missing in\n{s}");
    }

    // The same summary as JSON, checked against the file and the runtime.
    let o = midge(&["show", p(&out), "--json"]);
    assert!(o.status.success(), "{}", text(&o.stderr));
    let j: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    let bytes = std::fs::read(&out).unwrap();
    let aligned = midge_runtime::embed::AlignedBytes::from_slice(&bytes);
    let model = midge_runtime::Model::parse(&aligned).unwrap();
    assert_eq!(j["file_bytes"], bytes.len());
    assert_eq!(j["layers"].as_array().unwrap().len(), model.layer_count());
    assert_eq!(j["workspace_len"], model.workspace_len());
    let ops: Vec<&str> = j["layers"]
        .as_array()
        .unwrap()
        .iter()
        .map(|l| l["op"].as_str().unwrap())
        .collect();
    assert_eq!(ops.first(), Some(&"pixels"));
    assert!(
        ops.contains(&"depthwise") && ops.contains(&"add"),
        "{ops:?}"
    );
    let sec = &j["sections"];
    let sum: u64 = [
        "header",
        "tensor_table",
        "layer_table",
        "weights",
        "biases",
        "params",
        "strings",
        "padding",
    ]
    .iter()
    .map(|k| sec[k].as_u64().unwrap())
    .sum();
    assert_eq!(sum, bytes.len() as u64, "sections add up to the file");
    let lb = j["lower_bound"].as_u64().unwrap();
    assert!(lb > 0 && lb <= model.workspace_len() as u64);

    let img = dir.join("val").join("dot").join("v0.png");
    let o = midge(&["classify", p(&out), p(&img)]);
    assert!(o.status.success(), "{}", text(&o.stderr));
    let s = text(&o.stdout);
    assert!(LABELS.iter().any(|l| s.contains(l)), "{s}");
    assert_eq!(s.lines().count(), 1);
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn compare_json_and_max_drop() {
    let dir = scratch("cli-c");
    let desc = write_model(&dir, "", 5);
    let o = midge(&["compare", p(&desc), "--json", "--also-fp16"]);
    assert!(o.status.success(), "{}", text(&o.stderr));
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    for k in [
        "float_top1",
        "quantized_top1",
        "drop_pp",
        "agreement",
        "layers",
    ] {
        assert!(v.get(k).is_some(), "{k} missing");
    }
    assert!(v["layers"][0]["name"].is_string());
    assert!(v["layers"][0].get("sqnr_db").is_some());
    assert!(v["fp16"]["top1"].is_number());
    let drop = v["drop_pp"].as_f64().unwrap();
    // Just under the measured drop → 3; just over → 0.
    let under = format!("{}", drop - 0.5);
    let o = midge(&["compare", p(&desc), "--max-drop", &under]);
    assert_eq!(o.status.code(), Some(3), "{}", text(&o.stderr));
    assert_eq!(text(&o.stderr).lines().count(), 1);
    let over = format!("{}", drop + 0.5);
    let o = midge(&["compare", p(&desc), "--max-drop", &over]);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o.stderr));
    assert!(text(&o.stdout).contains("SQNR"));
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn help_on_every_command() {
    for cmd in [
        vec!["--help"],
        vec!["quantize", "--help"],
        vec!["compare", "--help"],
        vec!["classify", "--help"],
        vec!["show", "--help"],
    ] {
        let o = midge(&cmd);
        assert!(o.status.success(), "{cmd:?}");
        assert!(text(&o.stdout).contains("Usage"), "{cmd:?}");
    }
}

#[test]
fn bad_input_exits_2_with_one_line_and_no_output() {
    let dir = scratch("cli-bad");
    let out = dir.join("x.midge");
    // Missing description.
    let o = midge(&["quantize", p(&dir.join("nope.toml")), "-o", p(&out)]);
    assert_eq!(o.status.code(), Some(2));
    let e = text(&o.stderr);
    assert_eq!(e.lines().count(), 1, "{e}");
    assert!(e.contains("nope.toml"), "{e}");
    assert!(!out.exists());
    // Weights that do not match: the stem has the wrong shape.
    let desc = write_model(&dir, "", 6);
    let t =
        std::fs::read_to_string(&desc)
            .unwrap()
            .replacen("out_channels = 4", "out_channels = 5", 1);
    std::fs::write(&desc, t).unwrap();
    let o = midge(&["quantize", p(&desc), "-o", p(&out)]);
    assert_eq!(o.status.code(), Some(2));
    assert_eq!(text(&o.stderr).lines().count(), 1, "{}", text(&o.stderr));
    assert!(!out.exists());
    // Not a model file.
    std::fs::write(dir.join("junk.midge"), b"not a model").unwrap();
    let o = midge(&["show", p(&dir.join("junk.midge"))]);
    assert_eq!(o.status.code(), Some(2));
    assert!(text(&o.stderr).contains("junk.midge"));
    // Unknown flag: clap's message, still one line and status 2.
    let o = midge(&["quantize", "--frobnicate"]);
    assert_eq!(o.status.code(), Some(2));
    assert_eq!(text(&o.stderr).lines().count(), 1, "{}", text(&o.stderr));
    // Nothing but the inputs we wrote is left in the folder.
    let names: Vec<String> = std::fs::read_dir(&dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| n.contains("midge") && n != "junk.midge")
        .collect();
    assert!(names.is_empty(), "{names:?}");
    std::fs::remove_dir_all(&dir).unwrap();
}

/// `MIDGE_REQUIRE_EMULATOR=1` makes a runtime size that cannot be measured
/// (the profile names a Rust target that is not installed) an error of
/// `midge budget` — status 2, one stderr line naming the variable — where
/// without it the bill lists the item as not measured.
#[test]
fn required_emulator_turns_not_measured_into_an_error() {
    let missing = "thumbv7m-none-eabi";
    if midge_bench::firmware::rust_target_installed(missing).is_ok() {
        println!("{missing} is installed here: nothing to check");
        return;
    }
    let dir = scratch("cli-require");
    let desc = write_model(&dir, "", 4);
    let model = dir.join("tiny.midge");
    assert!(midge(&["quantize", p(&desc), "-o", p(&model)])
        .status
        .success());
    let board = dir.join("board.toml");
    std::fs::write(
        &board,
        format!(
            "name = \"board\"\ncore = \"cortex-m3\"\nrust_target = \"{missing}\"\n\
             clock_hz = 1000000\ncycles_per_instruction = 1.0\nram_bytes = 1048576\n\
             flash_bytes = 1048576\n[emulator]\nmachine = \"mps2-an385\"\n"
        ),
    )
    .unwrap();
    let args = ["budget", p(&model), "--target", p(&board), "--no-emulate"];
    let run = |required: Option<&str>| {
        let mut c = Command::new(env!("CARGO_BIN_EXE_midge"));
        c.args(args).env_remove("MIDGE_REQUIRE_EMULATOR");
        if let Some(v) = required {
            c.env("MIDGE_REQUIRE_EMULATOR", v);
        }
        c.output().unwrap()
    };
    let lax = run(None);
    assert!(lax.status.success(), "{}", text(&lax.stderr));
    assert!(
        text(&lax.stdout).contains("not measured"),
        "{}",
        text(&lax.stdout)
    );
    let strict = run(Some("1"));
    assert_eq!(strict.status.code(), Some(2), "{}", text(&strict.stdout));
    let err = text(&strict.stderr);
    assert_eq!(err.lines().count(), 1, "{err}");
    assert!(
        err.contains("MIDGE_REQUIRE_EMULATOR") && err.contains(missing),
        "{err}"
    );
    std::fs::remove_dir_all(&dir).unwrap();
}
