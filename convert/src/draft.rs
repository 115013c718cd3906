//! `midge draft`: writes a complete description for the user to edit, from
//! an ONNX file (everything but labels and image folders is read from its
//! graph) or from a safetensors file's tensor names and shapes (layers
//! guessed, every guess and every item it cannot know marked in comments).

use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use crate::description::{Description, LayerKind};
use crate::onnx::{self, OnnxModel};
use crate::weights::TensorMap;
use crate::{Error, Result};

/// Marks an item the user must fill in.
pub const EDIT: &str = "EDIT";
/// Marks an item the draft guessed from tensor shapes.
pub const GUESS: &str = "GUESS";

/// `midge draft` arguments.
#[derive(clap::Args, Debug)]
pub struct DraftArgs {
    /// An ONNX model (.onnx) or a safetensors weights file (.safetensors).
    pub model: PathBuf,
    /// Description to write [default: the model's path with extension .toml];
    /// an existing file is never replaced.
    #[arg(short, long, value_name = "FILE")]
    pub output: Option<PathBuf>,
    /// Calibration image folder to name in the draft.
    #[arg(long, value_name = "DIR")]
    pub calibration: Option<PathBuf>,
    /// Labels, comma-separated [default: class0, class1, ...].
    #[arg(long, value_delimiter = ',')]
    pub labels: Option<Vec<String>>,
}

/// A drafted description: its text and whether it loads as it is.
pub struct Draft {
    pub text: String,
    /// Why the draft does not load yet (a safetensors draft may need edits).
    pub problem: Option<Error>,
}

fn quote(s: &str) -> String {
    toml::Value::String(s.to_string()).to_string()
}

fn labels_line(labels: &Option<Vec<String>>, n: usize, out: &mut String) {
    let given = labels.as_ref().filter(|l| l.len() == n);
    let names: Vec<String> = match given {
        Some(l) => l.iter().map(|s| quote(s)).collect(),
        None => (0..n).map(|i| quote(&format!("class{i}"))).collect(),
    };
    if given.is_none() {
        let _ = writeln!(
            out,
            "# {EDIT}: one label per model output ({n}), in output order; each is also the name of its validation sub-folder."
        );
    }
    let _ = writeln!(out, "labels = [{}]", names.join(", "));
}

fn folders(calibration: &Option<PathBuf>, out: &mut String) {
    match calibration {
        Some(c) => {
            let _ = writeln!(out, "calibration = {}", quote(&c.display().to_string()));
        }
        None => {
            let _ = writeln!(
                out,
                "# {EDIT}: a folder of calibration images, needed by `midge quantize` and `assess`."
            );
            let _ = writeln!(out, "# calibration = \"calib\"");
        }
    }
    let _ = writeln!(
        out,
        "# validation = \"val\"             # one sub-folder per label (for compare/assess)"
    );
    let _ = writeln!(
        out,
        "# target = \"../targets/m4-80.toml\"   # default target profile (for budget/assess)"
    );
}

/// Path of `file` as written in a description at `desc`: relative to the
/// description's folder when it lies below it, else absolute.
fn relative_to(desc: &Path, file: &Path) -> String {
    let dir = desc.parent().unwrap_or(Path::new(""));
    let abs = |p: &Path| std::path::absolute(p).unwrap_or_else(|_| p.to_path_buf());
    let (d, f) = (abs(dir), abs(file));
    f.strip_prefix(&d)
        .map(Path::to_path_buf)
        .unwrap_or(f)
        .display()
        .to_string()
}

/// A draft from an ONNX file, to be written at `dest`.
pub fn from_onnx(model: &Path, dest: &Path, a: &DraftArgs) -> Result<Draft> {
    let m = OnnxModel::load(model)?;
    let low = onnx::lower(&m)?;
    let name = model
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "model".into());
    let mut out = String::new();
    let _ = writeln!(
        out,
        "# Drafted by `midge draft` from {}. Items marked {EDIT} are yours to fill in;",
        model.display()
    );
    let _ = writeln!(
        out,
        "# the layers, shapes and weights are read from the ONNX graph."
    );
    let _ = writeln!(out, "name = {}", quote(&name));
    labels_line(&a.labels, low.output_elems, &mut out);
    let _ = writeln!(out, "onnx = {}", quote(&relative_to(dest, model)));
    folders(&a.calibration, &mut out);
    let (h, w, c) = low.input_hwc;
    let _ = writeln!(out, "\n[input]");
    let _ = writeln!(out, "# From the graph: {h}×{w} pixels, {c} channel(s).");
    let norm: Vec<String> = low
        .affine
        .iter()
        .map(|(a, b)| format!("{:.6}·x + {:.6}", a, b))
        .collect();
    let _ = writeln!(
        out,
        "# Normalisation inside the graph (folded for you): {}.",
        norm.join(", ")
    );
    let _ = writeln!(
        out,
        "# {EDIT} if the graph input was not pixel / 255: the value a byte 255 stands for."
    );
    let _ = writeln!(out, "pixel_range = 1.0");
    let _ = writeln!(
        out,
        "# mean = [...] / std = [...]: only for normalisation done before the graph."
    );
    for n in &low.notes {
        let _ = writeln!(out, "\n# Note: {n}.");
    }
    let _ = writeln!(
        out,
        "\n# Layers from the graph; uncomment a table to set a layer's precision:"
    );
    for l in &low.layers {
        let name = l.name.as_deref().unwrap_or("");
        let kind = LayerKind::from_name(&l.op);
        if kind.is_some_and(|k| {
            matches!(
                k,
                LayerKind::Relu | LayerKind::Relu6 | LayerKind::BatchNorm | LayerKind::Flatten
            )
        }) {
            let _ = writeln!(
                out,
                "#   {name} ({}): fused or folded, no precision of its own",
                l.op
            );
            continue;
        }
        let _ = writeln!(
            out,
            "# [[layer]]\n# name = {}   # {}\n# precision = \"fp16\"",
            quote(name),
            l.op
        );
    }
    let problem = Description::from_toml_str(&out, dest).err();
    Ok(Draft { text: out, problem })
}

/// Prefix (everything before the last `.`) and part of a tensor name.
fn split(name: &str) -> (&str, &str) {
    name.rsplit_once('.').unwrap_or(("", name))
}

/// Natural order: digit runs compare as numbers (`blocks.2` before `blocks.10`).
fn natural_key(s: &str) -> Vec<(String, u64)> {
    let mut out = Vec::new();
    let mut text = String::new();
    let mut num: Option<u64> = None;
    for ch in s.chars() {
        if let Some(d) = ch.to_digit(10) {
            num = Some(num.unwrap_or(0).saturating_mul(10).saturating_add(d as u64));
        } else {
            if let Some(n) = num.take() {
                out.push((std::mem::take(&mut text), n));
            }
            text.push(ch);
        }
    }
    out.push((text, num.unwrap_or(0)));
    out
}

/// A draft from a safetensors file's tensor names and shapes.
pub fn from_safetensors(weights: &Path, dest: &Path, a: &DraftArgs) -> Result<Draft> {
    let t = TensorMap::load(weights)?;
    let mut groups: BTreeMap<String, BTreeMap<String, Vec<usize>>> = BTreeMap::new();
    for (n, tensor) in &t.tensors {
        let (p, part) = split(n);
        groups
            .entry(p.to_string())
            .or_default()
            .insert(part.to_string(), tensor.shape.clone());
    }
    // safetensors files list tensors by name, not in module order: stems
    // first, heads last, the rest in natural name order (a guess).
    let rank = |p: &str| {
        let first = p.split('.').next().unwrap_or("");
        if ["stem", "conv1", "conv0", "input", "features", "first"].contains(&first) {
            0
        } else if [
            "head",
            "fc",
            "classifier",
            "linear",
            "output",
            "logits",
            "out",
        ]
        .contains(&first)
        {
            2
        } else {
            1
        }
    };
    // Flat names (`conv1`, `bn1`, `conv2`): by number, a convolution before
    // the BatchNorm of the same number; dotted module paths: natural order.
    let flat = groups.keys().all(|p| !p.contains('.'));
    let bn_last = |p: &str| groups[p].contains_key("running_mean") as u8;
    let mut order: Vec<&String> = groups.keys().collect();
    order.sort_by_key(|p| {
        let nums: Vec<u64> = natural_key(p).iter().map(|(_, n)| *n).collect();
        if flat {
            (rank(p), nums, bn_last(p), natural_key(p))
        } else {
            (rank(p), Vec::new(), 0, natural_key(p))
        }
    });
    let mut body = String::new();
    let mut in_c: Option<usize> = None;
    let mut cur_c: Option<usize> = None;
    let mut spatial = true;
    let mut outputs = 1;
    for (k, p) in order.into_iter().enumerate() {
        let g = &groups[p];
        let name = if p.is_empty() {
            format!("layer{k}")
        } else {
            p.replace('.', "_")
        };
        let tensor_line = format!("tensor = {}", quote(p));
        let has_bias = g.contains_key("bias");
        match g.get("weight").map(Vec::as_slice) {
            Some(&[o, i, kh, kw]) => {
                let depthwise = i == 1 && cur_c == Some(o) && o > 1;
                if in_c.is_none() {
                    in_c = Some(i);
                }
                let pad = if kh == kw && kh % 2 == 1 {
                    format!(
                        "padding = {}   # {GUESS}: \"same\"-size output, stride 1",
                        kh / 2
                    )
                } else {
                    format!("padding = 0   # {GUESS}: stride 1, no padding")
                };
                let op = if depthwise { "depthwise" } else { "conv2d" };
                let _ = writeln!(body, "\n[[layer]]\nname = {}\nop = \"{op}\"   # {GUESS} from weight [{o}, {i}, {kh}, {kw}]{}", quote(&name), if i == 1 { " (a weight with one input channel could be either conv2d or depthwise)" } else { "" });
                let _ = writeln!(body, "{tensor_line}");
                if !depthwise {
                    let _ = writeln!(body, "out_channels = {o}");
                }
                let _ = writeln!(
                    body,
                    "kernel = [{kh}, {kw}]\nstride = 1   # {GUESS}\n{pad}\nbias = {has_bias}"
                );
                cur_c = Some(o);
                spatial = true;
            }
            Some(&[o, i]) => {
                if spatial {
                    let c = cur_c.unwrap_or(i);
                    let (op, why) = if c == i {
                        (
                            "global_avgpool",
                            "the dense input size equals the channel count",
                        )
                    } else {
                        ("flatten", "the dense input size is not the channel count")
                    };
                    let _ = writeln!(body, "\n[[layer]]\nop = \"{op}\"   # {GUESS}: {why}");
                    spatial = false;
                }
                let _ = writeln!(body, "\n[[layer]]\nname = {}\nop = \"dense\"   # from weight [{o}, {i}]\n{tensor_line}\nout_features = {o}\nbias = {has_bias}", quote(&name));
                cur_c = Some(o);
                outputs = o;
                if in_c.is_none() {
                    in_c = Some(i);
                }
            }
            Some(&[c]) if g.contains_key("running_mean") && g.contains_key("running_var") => {
                let _ = writeln!(
                    body,
                    "\n[[layer]]\nname = {}\nop = \"batchnorm\"   # {c} channels\n{tensor_line}",
                    quote(&name)
                );
                let _ = writeln!(body, "\n[[layer]]\nop = \"relu\"   # {GUESS}: BatchNorm is usually followed by ReLU (or relu6)");
            }
            _ => {
                let parts: Vec<String> = g.iter().map(|(n, s)| format!("{n} {s:?}")).collect();
                let _ = writeln!(
                    body,
                    "\n# {EDIT}: tensors under {} not recognised: {}",
                    quote(p),
                    parts.join(", ")
                );
            }
        }
    }
    let mut out = String::new();
    let stem = weights
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "model".into());
    let _ = writeln!(
        out,
        "# Drafted by `midge draft` from the tensor names and shapes of {}.",
        weights.display()
    );
    let _ = writeln!(
        out,
        "# A weights file does not say how its layers connect: items marked {GUESS} were guessed"
    );
    let _ = writeln!(
        out,
        "# from shapes and names, items marked {EDIT} cannot be known. Check the layer order"
    );
    let _ = writeln!(
        out,
        "# ({GUESS}: stems first, heads last, the rest by name), pooling layers (none can be"
    );
    let _ = writeln!(
        out,
        "# seen in weights), strides, activations and residual adds (`from`)."
    );
    let _ = writeln!(out, "name = {}", quote(&stem));
    labels_line(&a.labels, outputs, &mut out);
    let _ = writeln!(out, "weights = {}", quote(&relative_to(dest, weights)));
    folders(&a.calibration, &mut out);
    let _ = writeln!(
        out,
        "\n[input]\n# {EDIT}: the image size the model was trained on.\nheight = 32\nwidth = 32"
    );
    let _ = writeln!(
        out,
        "channels = {}   # from the first weight",
        in_c.unwrap_or(1)
    );
    let _ = writeln!(
        out,
        "# {EDIT}: the training normalisation, per channel, and the value a byte 255 stands for."
    );
    let _ = writeln!(
        out,
        "mean = [{}]\nstd = [{}]\npixel_range = 1.0",
        vec!["0.0"; in_c.unwrap_or(1)].join(", "),
        vec!["1.0"; in_c.unwrap_or(1)].join(", ")
    );
    out.push_str(&body);
    let problem = Description::from_toml_str(&out, dest)
        .and_then(|d| TensorMap::load(weights)?.check(&d).map(|_| ()))
        .err();
    Ok(Draft { text: out, problem })
}

/// Run `midge draft`: write the draft (never over an existing file) and say
/// whether it loads as it is.
pub fn cmd_draft(a: &DraftArgs) -> Result<i32> {
    let place = crate::error::escape_path(&a.model);
    let ext = a
        .model
        .extension()
        .map(|e| e.to_string_lossy().to_lowercase())
        .unwrap_or_default();
    let dest = a
        .output
        .clone()
        .unwrap_or_else(|| a.model.with_extension("toml"));
    if dest.symlink_metadata().is_ok() {
        return Err(Error::new(
            crate::error::escape_path(&dest),
            "exists; a draft never replaces a file: name another with -o",
        ));
    }
    let draft = match ext.as_str() {
        "onnx" => from_onnx(&a.model, &dest, a)?,
        "safetensors" => from_safetensors(&a.model, &dest, a)?,
        _ => {
            return Err(Error::new(
                place,
                "expected an ONNX model (.onnx) or a safetensors file (.safetensors)",
            ))
        }
    };
    crate::output::write_outputs(&[(&dest, draft.text.as_bytes())], &[&a.model])?;
    match &draft.problem {
        None => println!(
            "wrote {}: it loads as it is; edit the items marked {EDIT} (labels, image folders)",
            crate::error::escape_path(&dest)
        ),
        Some(e) => println!(
            "wrote {}: edit the items marked {EDIT} and check those marked {GUESS}; as drafted it does not load yet: {e}",
            crate::error::escape_path(&dest)
        ),
    }
    Ok(0)
}
