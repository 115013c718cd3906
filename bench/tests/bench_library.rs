//! midge-bench as a library: host latency agrees with the runtime's own
//! outputs and counts, reports render (text, JSON with the documented keys,
//! self-contained HTML), sweeps scale and mark fits consistently.

use std::path::{Path, PathBuf};

use midge_bench::budget::{evaluate, model_bytes_for, BudgetOptions};
use midge_bench::footprint::model_footprint;
use midge_bench::host::host_latency;
use midge_bench::report::sweep_text;
use midge_bench::sweep::sweep;
use midge_bench::target::Target;
use midge_bench::{bench_report, synth_inputs, ReportOptions};
use midge_convert::description::Description;
use midge_runtime::embed::AlignedBytes;
use midge_runtime::Model;

fn models() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../models")
}

fn offline() -> BudgetOptions {
    BudgetOptions {
        measure_runtime: false,
        emulate: false,
        ..BudgetOptions::default()
    }
}

#[test]
fn host_latency_outputs_and_counts_match_the_runtime() {
    let bytes = model_bytes_for(&models().join("reference/kws-dscnn.toml"), 5).unwrap();
    let aligned = AlignedBytes::from_slice(&bytes);
    let model = Model::parse(&aligned).unwrap();
    let inputs = synth_inputs(&model, 2, 9);
    let h = host_latency(&bytes, &inputs, 3, 1).unwrap();
    let mut ws = AlignedBytes::zeroed(model.workspace_len());
    for (k, inp) in inputs.iter().enumerate() {
        assert_eq!(h.outputs[k], model.run(inp, &mut ws).unwrap());
    }
    assert_eq!(h.layers.len(), model.layer_count());
    assert_eq!(h.macs, model_footprint(&model).macs);
    for l in &h.layers {
        assert!(l.time.min_ns <= l.time.median_ns && l.time.median_ns <= l.time.max_ns);
        assert_eq!(l.macs, model.layer_macs(l.index));
    }
    assert_eq!(h.runs, 3);
}

#[test]
fn report_renders_text_json_and_html() {
    let opts = ReportOptions {
        targets: vec![Target::resolve("m0plus-48").unwrap()],
        runs: 2,
        warmup: 0,
        emulate: false,
        measure_runtime: false,
        ..ReportOptions::default()
    };
    let r = bench_report(&models().join("reference/resnet8.toml"), &opts).unwrap();
    let text = r.render_text();
    assert!(text.contains("◀ peak"), "{text}");
    assert!(text.contains("budget of resnet8 on m0plus-48"));
    // ResNet-8's 48 KiB workspace alone exceeds the M0+ profile's 24 KiB.
    assert!(!r.budgets[0].fits);
    let json = serde_json::to_value(&r).unwrap();
    let b = &json["budgets"][0];
    for key in ["flash_bytes", "ram_bytes", "fits"] {
        assert!(!b[key].is_null(), "budget JSON lacks {key}");
    }
    assert_eq!(json["footprint"]["macs"], 12_501_632u64);
    let html = r.render_html();
    assert!(html.starts_with("<!doctype html>"));
    assert!(
        html.matches("<svg").count() >= 2,
        "memory timeline and latency charts"
    );
    // Self-contained: no external scripts, styles or images.
    for external in ["<script", "<link", "src="] {
        assert!(!html.contains(external), "{external}");
    }
}

#[test]
fn report_with_compare_carries_the_accuracy_report() {
    let opts = ReportOptions {
        runs: 1,
        warmup: 0,
        emulate: false,
        measure_runtime: false,
        compare: true,
        ..ReportOptions::default()
    };
    let path = models().join("caps/plain.toml");
    let r = bench_report(&path, &opts).unwrap();
    let a = r.accuracy.as_ref().expect("compare run included");
    // The bundled caps validation folder: 4 labels × 100 images
    // (models/caps/README.md).
    assert_eq!(a.images, 400);
    assert_eq!(a.layers.len(), r.footprint.layers.len());
    let html = r.render_html();
    for chart in ["confusion", "confusion-float", "sqnr", "logit-error"] {
        assert!(html.contains(&format!("data-chart='{chart}'")), "{chart}");
    }
    assert!(r.render_text().contains("per-layer SQNR"));
    assert!(serde_json::to_value(&r).unwrap()["accuracy"]["confusion"].is_array());
}

#[test]
fn sweep_scales_and_marks_fits() {
    let desc = Description::load(&models().join("caps/plain.toml")).unwrap();
    let targets = vec![
        Target::resolve("m0plus-48").unwrap(),
        Target::resolve("m7-400").unwrap(),
    ];
    let rows = sweep(
        &desc,
        &[0.5, 1.0],
        &[(32, 32), (4, 4)],
        &targets,
        &offline(),
        1,
    )
    .unwrap();
    assert_eq!(rows.len(), 4);
    let (half, full) = (&rows[0], &rows[2]);
    assert_eq!((half.width, half.input_hw), (0.5, (32, 32)));
    assert!(half.params < full.params && half.macs < full.macs);
    // Three 2×2 max pools cannot run on a 4×4 input: the variant says why.
    assert!(rows[1].error.is_some() && rows[3].error.is_some());
    for r in rows.iter().filter(|r| r.error.is_none()) {
        for (c, t) in r.cells.iter().zip(&targets) {
            assert_eq!(
                c.fits,
                c.flash_bytes <= t.flash_available() && c.ram_bytes <= t.ram_available()
            );
        }
    }
    let text = sweep_text(&rows);
    assert!(text.contains("m7-400 flash/RAM") && text.contains("not built"));
    // The same numbers as a direct budget of the same variant.
    let bytes = midge_convert::synth::synth_quantize(&desc.scaled(1.0, Some((32, 32))), 1)
        .unwrap()
        .bytes;
    let b = evaluate(&bytes, &targets[1], &offline()).unwrap().budget;
    assert_eq!(full.cells[1].ram_bytes, b.ram_bytes);
}
