//! The memory planner on every bundled and reference model: the workspace it
//! places equals its own lower bound (the most bytes live at any one layer,
//! counted from the same lifetimes), and the runtime accepts the placement.
//! The tensor shapes alone decide the plan, so seeded synthetic weights
//! (`synth`) stand in for trained ones.

use std::path::{Path, PathBuf};

use midge_convert::description::Description;
use midge_convert::{plan, synth};
use midge_runtime::embed::AlignedBytes;
use midge_runtime::Model;

pub fn all_models() -> Vec<PathBuf> {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("../models");
    let mut out = vec![root.join("digits/model.toml")];
    for dir in ["caps", "reference"] {
        let mut found: Vec<PathBuf> = std::fs::read_dir(root.join(dir))
            .unwrap()
            .map(|e| e.unwrap().path())
            .filter(|p| p.extension().is_some_and(|e| e == "toml"))
            .collect();
        found.sort();
        out.extend(found);
    }
    out
}

#[test]
fn every_model_plan_reaches_its_lower_bound() {
    let models = all_models();
    assert!(models.len() >= 6, "{models:?}");
    for path in models {
        let desc = Description::load(&path).unwrap();
        let q = synth::synth_quantize(&desc, 7).unwrap();
        let bytes = AlignedBytes::from_slice(&q.bytes);
        let model = Model::parse(&bytes).unwrap();
        // The bound recomputed from the written model file's layer table.
        let sizes: Vec<usize> = (0..model.tensor_count())
            .map(|t| model.tensor(t).unwrap().byte_len())
            .collect();
        let headers: Vec<_> = (0..model.layer_count())
            .map(|i| model.layer(i).unwrap().header)
            .collect();
        let lt = plan::lifetimes(&sizes, &plan::steps(&headers), model.output_id(), &[0]);
        let bound = plan::lower_bound(&lt);
        println!(
            "{}: workspace {} B, lower bound {} B",
            path.display(),
            model.workspace_len(),
            bound
        );
        assert_eq!(q.plan.lower_bound, bound, "{}", path.display());
        assert_eq!(model.workspace_len(), bound, "{}", path.display());
    }
}
