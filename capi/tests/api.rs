//! The C interface called as C would call it, on the bottle-cap demo model: every query
//! agrees with `midge_runtime::Model`, `midge_run` gives `Model::run`'s bytes, the layer
//! hook sees every layer, and every bad argument is a status code, never a crash.

use std::ffi::{c_char, c_void, CStr};
use std::path::Path;
use std::ptr::{null, null_mut};

use midge_c::*;
use midge_convert::images;
use midge_convert::quantize::{image_spec, quantize_description, QuantizeOptions};
use midge_runtime::embed::AlignedBytes;
use midge_runtime::{exec, ElemType, Model};

/// The int8 caps model and one of its calibration images.
fn caps() -> (AlignedBytes, Vec<u8>) {
    let desc = Path::new(env!("CARGO_MANIFEST_DIR")).join("../models/caps/plain.toml");
    let conv = quantize_description(&desc, &QuantizeOptions::default()).unwrap();
    let spec = image_spec(&conv.desc);
    let first = images::all_images(conv.desc.calibration.as_ref().unwrap()).unwrap()[0].clone();
    let input = images::load_image(&first, &spec).unwrap();
    (AlignedBytes::from_slice(&conv.quantized.bytes), input)
}

fn blank() -> MidgeModel {
    // SAFETY: MidgeModel is plain bytes; all-zero is its "not open" state.
    unsafe { std::mem::zeroed() }
}

fn open(bytes: &[u8]) -> (MidgeModel, MidgeStatus) {
    let mut h = blank();
    // SAFETY: a live handle and a live byte slice of the given length.
    let s = unsafe { midge_open(&mut h, bytes.as_ptr(), bytes.len()) };
    (h, s)
}

fn text(s: MidgeStatus) -> String {
    // SAFETY: midge_status_text returns a static NUL-terminated string.
    unsafe { CStr::from_ptr(midge_status_text(s as i32)) }
        .to_string_lossy()
        .into_owned()
}

#[test]
fn handle_size_is_what_the_header_states() {
    assert_eq!(std::mem::size_of::<MidgeModel>(), MIDGE_MODEL_SIZE);
    assert_eq!(std::mem::align_of::<MidgeModel>(), MIDGE_ALIGN);
}

#[test]
fn queries_agree_with_the_runtime() {
    let (bytes, _) = caps();
    let model = Model::parse(&bytes).unwrap();
    let (h, s) = open(&bytes);
    assert_eq!(s, MidgeStatus::Ok, "{}", text(s));
    let mut info = MidgeTensorInfo {
        height: 0,
        width: 0,
        channels: 0,
        elem: 99,
        byte_len: 0,
        scale: 0.0,
        zero_point: 0,
    };
    // SAFETY: live handle and out-parameter.
    assert_eq!(unsafe { midge_input_info(&h, &mut info) }, MidgeStatus::Ok);
    let i = model.input();
    assert_eq!(
        (info.height, info.width, info.channels),
        (i.shape.h as u32, i.shape.w as u32, i.shape.c as u32)
    );
    assert_eq!((info.elem, info.byte_len), (MIDGE_ELEM_U8, i.byte_len()));
    // SAFETY: as above.
    assert_eq!(unsafe { midge_output_info(&h, &mut info) }, MidgeStatus::Ok);
    let o = model.output();
    assert_eq!(o.elem, ElemType::I8);
    assert_eq!((info.elem, info.byte_len), (MIDGE_ELEM_I8, o.byte_len()));
    assert_eq!(
        (info.scale, info.zero_point),
        (o.quant.scale, o.quant.zero_point)
    );
    // SAFETY: live handle.
    unsafe {
        assert_eq!(midge_workspace_size(&h), model.workspace_len());
        assert_eq!(midge_layer_count(&h) as usize, model.layer_count());
        assert_eq!(midge_label_count(&h) as usize, model.label_count());
    }
    for (k, want) in model.labels().enumerate() {
        let (mut p, mut n): (*const c_char, usize) = (null(), 0);
        // SAFETY: live handle and out-parameters.
        assert_eq!(
            unsafe { midge_label(&h, k as u32, &mut p, &mut n) },
            MidgeStatus::Ok
        );
        // SAFETY: midge_label points into the model bytes, `n` long.
        let got = unsafe { std::slice::from_raw_parts(p.cast::<u8>(), n) };
        assert_eq!(got, want.as_bytes());
    }
    let (mut p, mut n): (*const c_char, usize) = (null(), 0);
    let past = model.label_count() as u32;
    // SAFETY: as above.
    unsafe {
        assert_eq!(
            midge_label(&h, past, &mut p, &mut n),
            MidgeStatus::IndexOutOfRange
        );
        assert_eq!(midge_name(&h, &mut p, &mut n), MidgeStatus::Ok);
        assert_eq!(
            std::slice::from_raw_parts(p.cast::<u8>(), n),
            model.name().as_bytes()
        );
        assert_eq!(
            midge_label(&h, 0, null_mut(), &mut n),
            MidgeStatus::NullArgument
        );
    }
}

#[derive(Default)]
struct Seen {
    events: Vec<(u32, u32, usize)>,
}

unsafe extern "C" fn record(
    user: *mut c_void,
    layer: u32,
    phase: u32,
    output: *const u8,
    len: usize,
) {
    // SAFETY: the test passes a live `Seen` as user data.
    let seen = unsafe { &mut *user.cast::<Seen>() };
    assert_eq!(output.is_null(), phase == MIDGE_BEFORE_LAYER);
    seen.events.push((layer, phase, len));
}

#[test]
fn run_hook_and_argmax_agree_with_the_runtime() {
    let (bytes, input) = caps();
    let model = Model::parse(&bytes).unwrap();
    let mut host_ws = AlignedBytes::zeroed(model.workspace_len());
    let host = model.run(&input, &mut host_ws).unwrap().to_vec();
    let (h, _) = open(&bytes);
    let mut ws = AlignedBytes::zeroed(model.workspace_len() + 8);
    let (mut out, mut out_len): (*const u8, usize) = (null(), 0);
    let mut seen = Seen::default();
    // SAFETY: live handle, input, workspace, out-parameters and user data.
    let s = unsafe {
        midge_run_observed(
            &h,
            input.as_ptr(),
            input.len(),
            ws.as_mut_ptr(),
            model.workspace_len(),
            &mut out,
            &mut out_len,
            Some(record),
            (&mut seen as *mut Seen).cast(),
        )
    };
    assert_eq!(s, MidgeStatus::Ok, "{}", text(s));
    // SAFETY: midge_run_observed points at `out_len` bytes inside `ws`.
    let got = unsafe { std::slice::from_raw_parts(out, out_len) }.to_vec();
    assert_eq!(got, host);
    let want: Vec<(u32, u32, usize)> = (0..model.layer_count())
        .flat_map(|i| {
            let out = model
                .tensor(model.layer(i).unwrap().header.output as usize)
                .unwrap();
            [
                (i as u32, MIDGE_BEFORE_LAYER, 0),
                (i as u32, MIDGE_AFTER_LAYER, out.byte_len()),
            ]
        })
        .collect();
    assert_eq!(seen.events, want);
    let mut class = u32::MAX;
    // SAFETY: live handle, output bytes and out-parameter.
    unsafe {
        assert_eq!(
            midge_argmax(&h, got.as_ptr(), got.len(), &mut class),
            MidgeStatus::Ok
        );
        assert_eq!(
            class as usize,
            exec::top1(&model.output(), &host).unwrap().0
        );
        assert_eq!(
            midge_argmax(&h, got.as_ptr(), got.len() - 1, &mut class),
            MidgeStatus::OutputLength
        );
    }
}

#[test]
fn bad_arguments_are_status_codes() {
    let (bytes, input) = caps();
    let ws_len = Model::parse(&bytes).unwrap().workspace_len();
    let mut h = blank();
    let (mut out, mut out_len): (*const u8, usize) = (null(), 0);
    let mut ws = AlignedBytes::zeroed(ws_len + 16);
    // SAFETY: every pointer is NULL or live for its stated length; the
    // interface checks the rest, which is what this test is about.
    unsafe {
        assert_eq!(
            midge_open(null_mut(), bytes.as_ptr(), bytes.len()),
            MidgeStatus::NullArgument
        );
        assert_eq!(midge_open(&mut h, null(), 8), MidgeStatus::NullArgument);
        assert_eq!(
            midge_open(&mut h, bytes.as_ptr().add(1), bytes.len() - 1),
            MidgeStatus::Misaligned
        );
        assert_eq!(
            midge_open(&mut h, bytes.as_ptr(), 16),
            MidgeStatus::Truncated
        );
        assert_eq!(
            midge_open(&mut h, bytes.as_ptr(), usize::MAX),
            MidgeStatus::LengthTooLarge
        );
        let mut bad = bytes.to_vec();
        bad[0] ^= 1;
        let bad = AlignedBytes::from_slice(&bad);
        assert_eq!(
            midge_open(&mut h, bad.as_ptr(), bad.len()),
            MidgeStatus::BadMagic
        );
        let mut bad = bytes.to_vec();
        let last = bad.len() - 1;
        bad[last] ^= 0x5a;
        let bad = AlignedBytes::from_slice(&bad);
        assert_eq!(
            midge_open(&mut h, bad.as_ptr(), bad.len()),
            MidgeStatus::CrcMismatch
        );
        // A failed open leaves the handle not open.
        assert_eq!(midge_workspace_size(&h), 0);
        assert_eq!(
            midge_run(
                &h,
                input.as_ptr(),
                input.len(),
                ws.as_mut_ptr(),
                ws_len,
                &mut out,
                &mut out_len
            ),
            MidgeStatus::NotOpen
        );
        assert_eq!(midge_workspace_size(null()), 0);
        let misaligned = (&h as *const MidgeModel)
            .cast::<u8>()
            .add(4)
            .cast::<MidgeModel>();
        assert_eq!(midge_layer_count(misaligned), 0);

        assert_eq!(
            midge_open(&mut h, bytes.as_ptr(), bytes.len()),
            MidgeStatus::Ok
        );
        let run = |i: &[u8], w: *mut u8, n: usize, o: &mut *const u8, l: &mut usize| {
            midge_run(&h, i.as_ptr(), i.len(), w, n, o, l)
        };
        let w = ws.as_mut_ptr();
        assert_eq!(
            run(&input[1..], w, ws_len, &mut out, &mut out_len),
            MidgeStatus::InputLength
        );
        assert_eq!(
            run(&input, w, ws_len - 1, &mut out, &mut out_len),
            MidgeStatus::WorkspaceLength
        );
        assert_eq!(
            run(&input, w.add(4), ws_len, &mut out, &mut out_len),
            MidgeStatus::WorkspaceMisaligned
        );
        assert_eq!(
            midge_run(
                &h,
                input.as_ptr(),
                input.len(),
                null_mut(),
                ws_len,
                &mut out,
                &mut out_len
            ),
            MidgeStatus::NullArgument
        );
        assert_eq!(
            midge_run(
                &h,
                input.as_ptr(),
                input.len(),
                w,
                ws_len,
                null_mut(),
                &mut out_len
            ),
            MidgeStatus::NullArgument
        );
        // The input inside the workspace, and the workspace over the model bytes.
        assert_eq!(
            midge_run(&h, w.add(8), input.len(), w, ws_len, &mut out, &mut out_len),
            MidgeStatus::Overlap
        );
        assert_eq!(
            midge_run(
                &h,
                input.as_ptr(),
                input.len(),
                bytes.as_ptr() as *mut u8,
                ws_len,
                &mut out,
                &mut out_len
            ),
            MidgeStatus::Overlap
        );
        assert_eq!(
            run(&input, w, ws_len, &mut out, &mut out_len),
            MidgeStatus::Ok
        );

        assert_eq!(midge_close(&mut h), MidgeStatus::Ok);
        assert_eq!(midge_layer_count(&h), 0);
        assert_eq!(midge_close(null_mut()), MidgeStatus::NullArgument);
    }
    assert_eq!(
        text(MidgeStatus::Overlap),
        "workspace overlaps the model bytes or the input"
    );
}
