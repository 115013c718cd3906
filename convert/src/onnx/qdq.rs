//! Quantization-aware graphs: the scales and zero points of an ONNX model's
//! QuantizeLinear/DequantizeLinear pairs replace the calibrated ranges of
//! the tensors they sit on, with a note per tensor comparing the two.

use crate::calibrate::Range;
use crate::description::{Description, LayerKind};
use crate::graph::{FloatGraph, FloatOp, Precision};
use crate::quantize::activation_quant;
use crate::{Error, Result};

/// The real range an int8 scale and zero point represent.
pub fn range_of(scale: f32, zero_point: i32) -> Range {
    Range {
        min: ((-128 - zero_point) as f64 * scale as f64) as f32,
        max: ((127 - zero_point) as f64 * scale as f64) as f32,
    }
}

/// Folded tensor id of each description tensor id: a ReLU, ReLU6,
/// BatchNorm or flatten layer's output is the tensor it was folded into.
fn folded_ids(desc: &Description, graph: &FloatGraph) -> Result<Vec<Option<usize>>> {
    let infos = desc.topology()?;
    let mut fid: Vec<Option<usize>> = vec![Some(0); infos.len() + 1];
    for l in &infos {
        fid[l.index + 1] = match l.kind {
            LayerKind::Relu | LayerKind::Relu6 | LayerKind::BatchNorm | LayerKind::Flatten => {
                fid[l.inputs[0]]
            }
            _ => graph
                .nodes
                .iter()
                .position(|n| n.name == l.name)
                .map(|p| p + 1),
        };
    }
    Ok(fid)
}

/// Replace the calibrated ranges of the tensors the description's ONNX
/// model quantizes itself; the comparison with calibration goes to the
/// import's notes (printed by `midge quantize`).
pub fn apply(desc: &mut Description, graph: &FloatGraph, ranges: &mut [Range]) -> Result<()> {
    let Some(given) = desc.onnx_import.as_ref().map(|i| i.qdq.clone()) else {
        return Ok(());
    };
    if given.is_empty() {
        return Ok(());
    }
    let fid = folded_ids(desc, graph)?;
    let infos = desc.topology()?;
    let mut notes = Vec::new();
    for g in &given {
        let place = || format!("{}: QuantizeLinear \"{}\"", desc.origin.display(), g.node);
        let layer = infos
            .iter()
            .find(|l| l.name == g.layer)
            .ok_or_else(|| Error::new(place(), format!("no layer \"{}\"", g.layer)))?;
        let Some(id) = fid[layer.index + 1].filter(|&id| id > 0 && id < ranges.len()) else {
            notes.push(format!(
                "QDQ pair \"{}\" on \"{}\" is not used: that tensor is the input or is folded away",
                g.node, g.layer
            ));
            continue;
        };
        let node = &graph.nodes[id - 1];
        if node.precision == Precision::Fp16 {
            notes.push(format!(
                "QDQ pair \"{}\" on \"{}\" is not used: layer \"{}\" is fp16",
                g.node, g.layer, node.name
            ));
            continue;
        }
        if matches!(
            node.op,
            FloatOp::MaxPool { .. } | FloatOp::AvgPool { .. } | FloatOp::GlobalAvgPool
        ) {
            notes.push(format!(
                "QDQ pair \"{}\" on \"{}\" is not used: int8 pooling keeps its input's scale and zero point",
                g.node, g.layer
            ));
            continue;
        }
        let calibrated = activation_quant(ranges[id]);
        ranges[id] = range_of(g.scale, g.zero_point);
        let kept = activation_quant(ranges[id]);
        let differs = (kept.scale - calibrated.scale) / calibrated.scale * 100.0;
        notes.push(format!(
            "output of \"{}\": scale {:.6e} zero point {} from QDQ pair \"{}\" (calibration would choose scale {:.6e} zero point {}: {:+.1} %){}",
            node.name,
            kept.scale,
            kept.zero_point,
            g.node,
            calibrated.scale,
            calibrated.zero_point,
            differs,
            if kept.scale != g.scale || kept.zero_point != g.zero_point {
                format!(" — the runtime's scale {:.6e} zero point {} rounds the pair's {:.6e}, {}", kept.scale, kept.zero_point, g.scale, g.zero_point)
            } else {
                String::new()
            }
        ));
    }
    if let Some(i) = desc.onnx_import.as_mut() {
        i.notes.extend(notes);
    }
    Ok(())
}
