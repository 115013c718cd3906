//! Every op in int8 and fp16 on small tensors with hand-worked expected
//! values (the arithmetic is written beside each case), the fast paths
//! against the reference loop nests on random shapes, an independent
//! padded-copy convolution, `check_layer`'s rejections and `top1`.

use half::f16;
use midge_runtime::exec::{check_layer, run_layer, run_layer_reference, top1, Logit};
use midge_runtime::repr::*;
use midge_runtime::*;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

// ------------------------------------------------------------ test harness

const NO_ACT_F32: [f32; 2] = [-65504.0, 65504.0];
const FULL_I8: [i32; 2] = [-128, 127];

fn rec(h: u16, w: u16, c: u16, elem: ElemType, scale: f32, zp: i32) -> TensorRecord {
    TensorRecord {
        shape: Shape::new(h, w, c),
        elem,
        quant: Quant {
            scale,
            zero_point: zp,
        },
        offset: 0,
    }
}

fn i8t(h: u16, w: u16, c: u16, zp: i32) -> TensorRecord {
    rec(h, w, c, ElemType::I8, 0.5, zp)
}

fn f16t(h: u16, w: u16, c: u16) -> TensorRecord {
    rec(h, w, c, ElemType::F16, 1.0, 0)
}

fn header(op: Op, window: Window) -> LayerHeader {
    LayerHeader {
        op,
        act: Activation::None,
        inputs: [0, 0],
        output: 1,
        window,
        clamp_i8: FULL_I8,
        clamp_f32: NO_ACT_F32,
    }
}

fn layer<'a>(
    h: LayerHeader,
    weights: Weights<'a>,
    bias: Bias<'a>,
    params: Params<'a>,
) -> LayerRef<'a> {
    LayerRef {
        header: h,
        weights,
        bias,
        params,
    }
}

#[allow(clippy::too_many_arguments)]
fn window(kh: u16, kw: u16, sh: u16, sw: u16, dh: u16, dw: u16, pad: [u16; 4]) -> Window {
    Window::new((kh, kw), (sh, sw), (dh, dw), pad)
}

fn f16s(v: &[f32]) -> Vec<f16> {
    v.iter().map(|&x| f16::from_f32(x)).collect()
}

/// Tensor bytes, 8-aligned so fp16 views always succeed.
struct Buf {
    words: Vec<u64>,
    len: usize,
}

impl Buf {
    fn zeros(len: usize) -> Buf {
        Buf {
            words: vec![0; len.div_ceil(8)],
            len,
        }
    }
    fn from_bytes(b: &[u8]) -> Buf {
        let mut buf = Buf::zeros(b.len());
        buf.bytes_mut().copy_from_slice(b);
        buf
    }
    fn bytes(&self) -> &[u8] {
        &bytemuck::cast_slice(&self.words)[..self.len]
    }
    fn bytes_mut(&mut self) -> &mut [u8] {
        &mut bytemuck::cast_slice_mut(&mut self.words)[..self.len]
    }
}

fn i8_bytes(v: &[i8]) -> Buf {
    Buf::from_bytes(bytemuck::cast_slice(v))
}

fn f16_bytes(v: &[f16]) -> Buf {
    Buf::from_bytes(bytemuck::cast_slice(v))
}

/// Checks the layer, runs it through both the fast and the reference path,
/// asserts they agree byte for byte and returns the output bytes.
fn run2(
    l: &LayerRef<'_>,
    ta: &TensorRecord,
    xa: &Buf,
    b: Option<(&TensorRecord, &Buf)>,
    to: &TensorRecord,
) -> Buf {
    check_layer(7, l, ta, b.map(|b| b.0), to).expect("layer passes check_layer");
    let mut fast = Buf::zeros(to.byte_len());
    let mut slow = Buf::zeros(to.byte_len());
    let bb = b.map(|(t, x)| (t, x.bytes()));
    run_layer(l, (ta, xa.bytes()), bb, (to, fast.bytes_mut())).unwrap();
    run_layer_reference(l, (ta, xa.bytes()), bb, (to, slow.bytes_mut())).unwrap();
    assert_eq!(
        fast.bytes(),
        slow.bytes(),
        "fast path differs from the reference"
    );
    fast
}

fn as_i8(b: &Buf) -> Vec<i8> {
    bytemuck::cast_slice(b.bytes()).to_vec()
}

fn as_f32(b: &Buf) -> Vec<f32> {
    bytemuck::cast_slice::<u8, f16>(b.bytes())
        .iter()
        .map(|x| x.to_f32())
        .collect()
}

// --------------------------------------------------------- hand-worked ops

#[test]
fn pixels_int8() {
    // 1×2×2 camera bytes, zp_out = −120.
    // ch0: [offset 0, m 3·2^28, s 38] → real 3·2^28/2^38 = 0.75/256, so
    //      rq(p·256) = ⌊0.75·p + ½⌋: p=201 → ⌊150.75+½⌋ = 151 → 31; p=3 → ⌊2.25+½⌋ = 2 → −118.
    // ch1: [offset 32832, m 2^30, s 37] → ×2^−7:
    //      p=140: (35840 − 32832)/128 = 23.5 → 24 (tie up) → −96;
    //      p=128: (32768 − 32832)/128 = −0.5 → 0 (tie toward +∞) → −120.
    let params = [0, 3 << 28, 38, 32832, 1 << 30, 37];
    let l = layer(
        header(Op::Pixels, Window::default()),
        Weights::None,
        Bias::None,
        Params::I32(&params),
    );
    let ta = rec(1, 2, 2, ElemType::U8, 1.0 / 255.0, 0);
    let to = i8t(1, 2, 2, -120);
    let y = run2(&l, &ta, &Buf::from_bytes(&[201, 140, 3, 128]), None, &to);
    assert_eq!(as_i8(&y), [31, -96, -118, -120]);
}

// Images with more than 256 pixels per channel take the per-channel table;
// every byte must still follow the FORMAT.md formula
// q = clamp(zp + ⌊((p·256 − offset)·m + 2^(s−1)) / 2^s⌋), worked here in i64.
#[test]
fn pixels_int8_table_matches_formula() {
    let (h, w, c) = (20u16, 20u16, 3usize);
    let params = [0, 3 << 28, 38, 32832, 1 << 30, 37, -5000, 1_500_000_000, 40];
    let l = layer(
        header(Op::Pixels, Window::default()),
        Weights::None,
        Bias::None,
        Params::I32(&params),
    );
    let ta = rec(h, w, c as u16, ElemType::U8, 1.0 / 255.0, 0);
    let to = i8t(h, w, c as u16, -3);
    let x: Vec<u8> = (0..h as usize * w as usize * c)
        .map(|i| (i * 37 % 256) as u8)
        .collect();
    let y = run2(&l, &ta, &Buf::from_bytes(&x), None, &to);
    let want: Vec<i8> = x
        .iter()
        .enumerate()
        .map(|(i, &p)| {
            let prm = &params[3 * (i % c)..];
            let acc = p as i64 * 256 - prm[0] as i64;
            let s = prm[2] as u32;
            let r = (acc * prm[1] as i64 + (1i64 << (s - 1))) >> s;
            (r - 3).clamp(-128, 127) as i8
        })
        .collect();
    assert_eq!(as_i8(&y), want);
}

#[test]
fn pixels_fp16() {
    // ch0 [a 0.25, b −1]: 51·0.25 − 1 = 11.75; ch1 [a 2^−8, b −0.5]: 255/256 − 0.5 = 0.49609375
    // (= 127/256, exact in binary16).
    let params = [0.25f32, -1.0, 1.0 / 256.0, -0.5];
    let l = layer(
        header(Op::Pixels, Window::default()),
        Weights::None,
        Bias::None,
        Params::F32(&params),
    );
    let ta = rec(1, 1, 2, ElemType::U8, 1.0, 0);
    let y = run2(&l, &ta, &Buf::from_bytes(&[51, 255]), None, &f16t(1, 1, 2));
    assert_eq!(as_f32(&y), [11.75, 0.49609375]);
}

// Shared conv2d example: input 2×2×2 (HWC)
//   (0,0) = [5, −2], (0,1) = [1, 4], (1,0) = [−3, 0], (1,1) = [2, 7]
// weights [o=0][ky][kx][ic]: (0,0) = [1, 2], (0,1) = [−1, 0], (1,0) = [3, −2], (1,1) = [0, 1]
// kernel 2×2, stride 1, pad top 1 and left 1 → output (2+1−2)+1 = 2 → 2×2×1;
// tap (ky,kx) of output (oy,ox) reads input (oy+ky−1, ox+kx−1).
const CONV_X: [i8; 8] = [5, -2, 1, 4, -3, 0, 2, 7];
const CONV_W: [i8; 8] = [1, 2, -1, 0, 3, -2, 0, 1];

fn conv_window() -> Window {
    window(2, 2, 1, 1, 1, 1, [1, 1, 0, 0])
}

#[test]
fn conv2d_int8() {
    // zp_in = 3 (padded taps read q = 3), bias 10, ×0.5 (m 2^30, s 31), zp_out −4,
    // clamp [−4, 8] (a fused ReLU6 at scale 0.5: −4 + 6/0.5 = 8).
    // pad tap sums: (0,0): 3·1+3·2 = 9; (0,1): 3·(−1)+0 = −3; (1,0): 3·3+3·(−2) = 3; (1,1): 3·0+3·1 = 3.
    // (0,0): pads (0,0),(0,1),(1,0) = 9 − 3 + 3, tap (1,1)→x(0,0): 5·0 + (−2)·1 = −2 → 7;
    //        acc 17 → 8.5 → 9 (tie up) → 5.
    // (0,1): pads (0,0),(0,1) = 6; (1,0)→x(0,0): 5·3 + (−2)(−2) = 19; (1,1)→x(0,1): 0 + 4 = 4 → 29;
    //        acc 39 → 19.5 → 20 → 16 → clamp 8.
    // (1,0): pads (0,0),(1,0) = 12; (0,1)→x(0,0): −5; (1,1)→x(1,0): 0 → 7; acc 17 → 9 → 5.
    // (1,1): x(0,0)·(1,2) = 1; x(0,1)·(−1,0) = −1; x(1,0)·(3,−2) = −9; x(1,1)·(0,1) = 7 → −2;
    //        acc 8 → 4 → 0.
    let bias = [10];
    let rq = [1 << 30, 31];
    let mut h = header(Op::Conv2d, conv_window());
    h.clamp_i8 = [-4, 8];
    let l = layer(
        h,
        Weights::I8(&CONV_W),
        Bias::I32(&bias),
        Params::Requant(&rq),
    );
    let y = run2(
        &l,
        &i8t(2, 2, 2, 3),
        &i8_bytes(&CONV_X),
        None,
        &i8t(2, 2, 1, -4),
    );
    assert_eq!(as_i8(&y), [5, 8, 5, 0]);
}

#[test]
fn conv2d_fp16() {
    // Same tensors in fp16, padded taps read 0, bias 10, clamp [0, 30]:
    // (0,0): −2 → 8; (0,1): 19 + 4 = 23 → 33 → 30; (1,0): −5 + 0 → 5; (1,1): −2 → 8.
    let x = f16s(&CONV_X.map(|v| v as f32));
    let w = f16s(&CONV_W.map(|v| v as f32));
    let bias = [10.0f32];
    let mut h = header(Op::Conv2d, conv_window());
    h.clamp_f32 = [0.0, 30.0];
    let l = layer(h, Weights::F16(&w), Bias::F32(&bias), Params::None);
    let y = run2(&l, &f16t(2, 2, 2), &f16_bytes(&x), None, &f16t(2, 2, 1));
    assert_eq!(as_f32(&y), [8.0, 30.0, 5.0, 8.0]);
}

#[test]
fn conv2d_pointwise_int8_and_fp16() {
    // 1×1 conv, 2 pixels × 2 channels → 2 channels, weights [[1, 1], [2, −1]],
    // bias [0, 1], ×1 (m 2^30, s 30), zp_out 0:
    // pixel [2, −3] → [−1, 1 + 4 + 3 = 8]; pixel [4, 4] → [8, 1 + 8 − 4 = 5].
    let x = [2i8, -3, 4, 4];
    let w = [1i8, 1, 2, -1];
    let pw = window(1, 1, 1, 1, 1, 1, [0; 4]);
    let rq = [1 << 30, 30, 1 << 30, 30];
    let l = layer(
        header(Op::Conv2d, pw),
        Weights::I8(&w),
        Bias::I32(&[0, 1]),
        Params::Requant(&rq),
    );
    let y = run2(&l, &i8t(1, 2, 2, 0), &i8_bytes(&x), None, &i8t(1, 2, 2, 0));
    assert_eq!(as_i8(&y), [-1, 8, 8, 5]);
    // fp16 with bias [0.5, 1]: [−0.5, 8, 8.5, 5].
    let (xf, wf) = (f16s(&x.map(|v| v as f32)), f16s(&w.map(|v| v as f32)));
    let l = layer(
        header(Op::Conv2d, pw),
        Weights::F16(&wf),
        Bias::F32(&[0.5, 1.0]),
        Params::None,
    );
    let y = run2(&l, &f16t(1, 2, 2), &f16_bytes(&xf), None, &f16t(1, 2, 2));
    assert_eq!(as_f32(&y), [-0.5, 8.0, 8.5, 5.0]);
}

// Shared depthwise example: input 2×2×2 (HWC)
//   (0,0) = [1, 2], (0,1) = [3, 4], (1,0) = [5, 6], (1,1) = [7, 8]
// weights [ky][kx][c]: (0,0) = [1, −1], (0,1) = [2, 0], (1,0) = [0, 3], (1,1) = [−1, 1]
// kernel 2×2, stride 1, pad right 1 → output 1×2×2; output (0,1) taps kx = 1 fall in the padding.
const DW_X: [i8; 8] = [1, 2, 3, 4, 5, 6, 7, 8];
const DW_W: [i8; 8] = [1, -1, 2, 0, 0, 3, -1, 1];

#[test]
fn depthwise_int8() {
    // zp_in = −1, bias [4, −6], ch0 ×1 (m 2^30, s 30), ch1 ×0.75 (m 3·2^29, s 31), zp_out 2.
    // (0,0) ch0: 1·1 + 3·2 + 5·0 + 7·(−1) = 0 → acc 4 → 4 → 6.
    // (0,0) ch1: 2·(−1) + 4·0 + 6·3 + 8·1 = 24 → acc 18 → 13.5 → 14 → 16.
    // (0,1) ch0: 3·1 + pad(−1)·2 + 7·0 + pad(−1)·(−1) = 2 → acc 6 → 6 → 8.
    // (0,1) ch1: 4·(−1) + pad·0 + 8·3 + pad(−1)·1 = 19 → acc 13 → 9.75 → 10 → 12.
    let rq = [1 << 30, 30, 3 << 29, 31];
    let win = window(2, 2, 1, 1, 1, 1, [0, 0, 0, 1]);
    let l = layer(
        header(Op::Depthwise, win),
        Weights::I8(&DW_W),
        Bias::I32(&[4, -6]),
        Params::Requant(&rq),
    );
    let y = run2(
        &l,
        &i8t(2, 2, 2, -1),
        &i8_bytes(&DW_X),
        None,
        &i8t(1, 2, 2, 2),
    );
    assert_eq!(as_i8(&y), [6, 16, 8, 12]);
}

#[test]
fn depthwise_fp16() {
    // As above with ch1's (0,0) weight −0.5, padded taps 0, bias [4, −6]:
    // (0,0) ch0: 0 + 4 = 4; ch1: 2·(−0.5) + 18 + 8 = 25 → 19.
    // (0,1) ch0: 3 + 0 = 3 → 7; ch1: 4·(−0.5) + 24 = 22 → 16.
    let x = f16s(&DW_X.map(|v| v as f32));
    let mut wv = DW_W.map(|v| v as f32);
    wv[1] = -0.5;
    let w = f16s(&wv);
    let win = window(2, 2, 1, 1, 1, 1, [0, 0, 0, 1]);
    let l = layer(
        header(Op::Depthwise, win),
        Weights::F16(&w),
        Bias::F32(&[4.0, -6.0]),
        Params::None,
    );
    let y = run2(&l, &f16t(2, 2, 2), &f16_bytes(&x), None, &f16t(1, 2, 2));
    assert_eq!(as_f32(&y), [4.0, 19.0, 7.0, 16.0]);
}

// Shared pooling input 3×3×1, rows [1, −5, 3], [7, 2, −8], [−1, 4, 0];
// 2×2 window, stride 2, pad bottom 1 and right 1 → output 2×2 (padded taps are skipped).
const POOL_X: [i8; 9] = [1, -5, 3, 7, 2, -8, -1, 4, 0];

fn pool_window() -> Window {
    window(2, 2, 2, 2, 1, 1, [0, 0, 1, 1])
}

/// `op` (max or average pooling, `pool_window`) over `POOL_X` in int8 with
/// zero point `zp`: the 2×2 output.
fn pool_int8(op: Op, zp: i32) -> Vec<i8> {
    let l = layer(
        header(op, pool_window()),
        Weights::None,
        Bias::None,
        Params::None,
    );
    let y = run2(
        &l,
        &i8t(3, 3, 1, zp),
        &i8_bytes(&POOL_X),
        None,
        &i8t(2, 2, 1, zp),
    );
    as_i8(&y)
}

/// `op` over `POOL_X` in fp16 with the corner value (index 8) −0.5: the
/// 2×2 output.
fn pool_fp16(op: Op) -> Vec<f32> {
    let mut xv = POOL_X.map(|v| v as f32);
    xv[8] = -0.5;
    let l = layer(
        header(op, pool_window()),
        Weights::None,
        Bias::None,
        Params::None,
    );
    let y = run2(
        &l,
        &f16t(3, 3, 1),
        &f16_bytes(&f16s(&xv)),
        None,
        &f16t(2, 2, 1),
    );
    as_f32(&y)
}

#[test]
fn maxpool_int8() {
    // (0,0) max(1, −5, 7, 2) = 7; (0,1) max(3, −8) = 3; (1,0) max(−1, 4) = 4; (1,1) max(0) = 0.
    // zp = 5: a padded tap read as the zero point would make (1,1) = 5.
    assert_eq!(pool_int8(Op::MaxPool, 5), [7, 3, 4, 0]);
}

#[test]
fn maxpool_fp16() {
    // As int8 with the corner −0.5: (1,1) = max(−0.5) = −0.5 (a padded 0 would give 0).
    assert_eq!(pool_fp16(Op::MaxPool), [7.0, 3.0, 4.0, -0.5]);
}

#[test]
fn avgpool_int8() {
    // zp = 2; averages of q − zp over in-bounds taps, rounded half away from zero, + zp:
    // (0,0): [−1, −7, 5, 0] = −3/4 = −0.75 → −1 → 1
    // (0,1): [1, −10] = −9/2 = −4.5 → −5 → −3
    // (1,0): [−3, 2] = −1/2 = −0.5 → −1 → 1
    // (1,1): [−2] → −2 → 0
    assert_eq!(pool_int8(Op::AvgPool, 2), [1, -3, 1, 0]);
}

#[test]
fn avgpool_fp16() {
    // (0,0): (1 − 5 + 7 + 2)/4 = 1.25; (0,1): (3 − 8)/2 = −2.5; (1,0): (−1 + 4)/2 = 1.5; (1,1): −0.5.
    assert_eq!(pool_fp16(Op::AvgPool), [1.25, -2.5, 1.5, -0.5]);
}

#[test]
fn global_avgpool_int8() {
    // 2×2×2, zp = −3. ch0 q [1, 2, 3, 5] → q − zp [4, 5, 6, 8] = 23/4 = 5.75 → 6 → 3.
    // ch1 q [−3, −4, −6, −5] → [0, −1, −3, −2] = −6/4 = −1.5 → −2 (away from zero) → −5.
    let x = [1i8, -3, 2, -4, 3, -6, 5, -5];
    let l = layer(
        header(Op::GlobalAvgPool, Window::default()),
        Weights::None,
        Bias::None,
        Params::None,
    );
    let y = run2(
        &l,
        &i8t(2, 2, 2, -3),
        &i8_bytes(&x),
        None,
        &i8t(1, 1, 2, -3),
    );
    assert_eq!(as_i8(&y), [3, -5]);
}

#[test]
fn global_avgpool_fp16() {
    // ch0 [1, 2, 3, 5] → 11/4 = 2.75; ch1 [−0.5, 0.25, 1, 2] → 2.75/4 = 0.6875.
    let x = f16s(&[1.0, -0.5, 2.0, 0.25, 3.0, 1.0, 5.0, 2.0]);
    let l = layer(
        header(Op::GlobalAvgPool, Window::default()),
        Weights::None,
        Bias::None,
        Params::None,
    );
    let y = run2(&l, &f16t(2, 2, 2), &f16_bytes(&x), None, &f16t(1, 1, 2));
    assert_eq!(as_f32(&y), [2.75, 0.6875]);
}

#[test]
fn dense_int8() {
    // Input 1×2×2 read flat in HWC order: [3, −1, 2, 5]; weights [[1, 2, 0, −1], [−3, 1, 1, 2]],
    // bias [7, −4], ×0.25 (m 2^30, s 32), zp_out 1.
    // o0: 3 − 2 + 0 − 5 = −4 → acc 3 → 0.75 → 1 → 2.
    // o1: −9 − 1 + 2 + 10 = 2 → acc −2 → −0.5 → 0 (tie toward +∞) → 1.
    let x = [3i8, -1, 2, 5];
    let w = [1i8, 2, 0, -1, -3, 1, 1, 2];
    let rq = [1 << 30, 32, 1 << 30, 32];
    let l = layer(
        header(Op::Dense, Window::default()),
        Weights::I8(&w),
        Bias::I32(&[7, -4]),
        Params::Requant(&rq),
    );
    let y = run2(&l, &i8t(1, 2, 2, 0), &i8_bytes(&x), None, &i8t(1, 1, 2, 1));
    assert_eq!(as_i8(&y), [2, 1]);
}

#[test]
fn dense_fp16() {
    // Input [3, −1, 2, 5], weights [[1, 2, 0, −1], [−3, 1, 1, 0.5]], bias [7, −4]:
    // o0: 3 − 2 + 0 − 5 + 7 = 3; o1: −9 − 1 + 2 + 2.5 − 4 = −9.5; ReLU clamp [0, 65504] → [3, 0].
    let x = f16s(&[3.0, -1.0, 2.0, 5.0]);
    let w = f16s(&[1.0, 2.0, 0.0, -1.0, -3.0, 1.0, 1.0, 0.5]);
    let mut h = header(Op::Dense, Window::default());
    h.clamp_f32 = [0.0, 65504.0];
    let l = layer(h, Weights::F16(&w), Bias::F32(&[7.0, -4.0]), Params::None);
    let y = run2(&l, &f16t(1, 2, 2), &f16_bytes(&x), None, &f16t(1, 1, 2));
    assert_eq!(as_f32(&y), [3.0, 0.0]);
    // Without the clamp the −9.5 survives.
    let l = layer(
        header(Op::Dense, Window::default()),
        Weights::F16(&w),
        Bias::F32(&[7.0, -4.0]),
        Params::None,
    );
    let y = run2(&l, &f16t(1, 2, 2), &f16_bytes(&x), None, &f16t(1, 1, 2));
    assert_eq!(as_f32(&y), [3.0, -9.5]);
}

#[test]
fn add_int8() {
    // zpa 1, zpb −2, zp_out 3; ma 2^30, mb 3·2^29, rshift 31 → a×0.5, b×0.75.
    // e0: qa 5, qb 2:   4·0.5 + 4·0.75 = 5 → 8
    // e1: qa −7, qb 6:  −8·0.5 + 8·0.75 = 2 → 5
    // e2: qa 127, qb 127: 126·0.5 + 129·0.75 = 159.75 → 160 → 163 → clamp 127
    // e3: qa 2, qb −2:  1·0.5 + 0 = 0.5 → ⌊0.5 + 0.5⌋ = 1 (tie up) → 4
    let a = [5i8, -7, 127, 2];
    let b = [2i8, 6, 127, -2];
    let p = [1 << 30, 3 << 29, 31];
    let l = layer(
        header(Op::Add, Window::default()),
        Weights::None,
        Bias::None,
        Params::I32(&p),
    );
    let (ta, tb) = (i8t(1, 1, 4, 1), i8t(1, 1, 4, -2));
    let y = run2(
        &l,
        &ta,
        &i8_bytes(&a),
        Some((&tb, &i8_bytes(&b))),
        &i8t(1, 1, 4, 3),
    );
    assert_eq!(as_i8(&y), [8, 5, 127, 4]);
}

#[test]
fn add_fp16() {
    // [1.5, −2, 60000] + [0.25, 3, 10000] = [1.75, 1, 70000 → clamp 65504].
    let a = f16s(&[1.5, -2.0, 60000.0]);
    let b = f16s(&[0.25, 3.0, 10000.0]);
    let l = layer(
        header(Op::Add, Window::default()),
        Weights::None,
        Bias::None,
        Params::None,
    );
    let t = f16t(1, 1, 3);
    let y = run2(&l, &t, &f16_bytes(&a), Some((&t, &f16_bytes(&b))), &t);
    assert_eq!(as_f32(&y), [1.75, 1.0, 65504.0]);
}

#[test]
fn quantize_fp16_to_int8() {
    // scale 0.5, zp −1: x/scale = [0.5, −1.5, 5, 200] → round half away [1, −2, 5, 200]
    // → + zp [0, −3, 4, 199 → clamp 127].
    let x = f16s(&[0.25, -0.75, 2.5, 100.0]);
    let l = layer(
        header(Op::Quantize, Window::default()),
        Weights::None,
        Bias::None,
        Params::None,
    );
    let y = run2(&l, &f16t(1, 1, 4), &f16_bytes(&x), None, &i8t(1, 1, 4, -1));
    assert_eq!(as_i8(&y), [0, -3, 4, 127]);
}

#[test]
fn dequantize_int8_to_fp16() {
    // zp 5, scale 0.25: (q − 5)·0.25 for q [−128, 0, 5, 127] = [−33.25, −1.25, 0, 30.5].
    let x = [-128i8, 0, 5, 127];
    let l = layer(
        header(Op::Dequantize, Window::default()),
        Weights::None,
        Bias::None,
        Params::None,
    );
    let ta = rec(1, 1, 4, ElemType::I8, 0.25, 5);
    let y = run2(&l, &ta, &i8_bytes(&x), None, &f16t(1, 1, 4));
    assert_eq!(as_f32(&y), [-33.25, -1.25, 0.0, 30.5]);
}

// ------------------------------------------------------------------ top1

#[test]
fn top1_int8_and_fp16() {
    let t = i8t(1, 1, 4, 0);
    let q = [3i8, 9, -2, 9];
    // Tie: the lowest index wins.
    assert_eq!(top1(&t, bytemuck::cast_slice(&q)), Some((1, Logit::I8(9))));
    let q = [-3i8, -1, -2, -100];
    assert_eq!(top1(&t, bytemuck::cast_slice(&q)), Some((1, Logit::I8(-1))));
    let t = f16t(1, 1, 5);
    let x = [
        f16::from_f32(-1.0),
        f16::NAN,
        f16::from_f32(0.5),
        f16::NEG_ZERO,
        f16::from_f32(-7.0),
    ];
    let buf = f16_bytes(&x);
    assert_eq!(
        top1(&t, buf.bytes()),
        Some((2, Logit::F16(f16::from_f32(0.5))))
    );
    let x = f16s(&[-3.0, -0.25, -2.0, -0.5, -65504.0]);
    assert_eq!(
        top1(&t, f16_bytes(&x).bytes()),
        Some((1, Logit::F16(f16::from_f32(-0.25))))
    );
    // Wrong length or element type.
    assert_eq!(top1(&t, &[0u8; 3]), None);
    assert_eq!(top1(&rec(1, 1, 1, ElemType::U8, 1.0, 0), &[0u8]), None);
}

#[test]
fn top1_fp16_against_float_comparison() {
    // The integer key order equals f32 order on random finite values.
    let mut rng = ChaCha8Rng::seed_from_u64(0x5eed_0101);
    let t = f16t(1, 1, 10);
    for _ in 0..2000 {
        let x: Vec<f16> = (0..10)
            .map(|_| {
                f16::from_f32(rng.gen_range(-300.0..300.0) * if rng.gen() { 1.0 } else { 1e-4 })
            })
            .collect();
        let mut best = 0;
        for (i, v) in x.iter().enumerate() {
            if v.to_f32() > x[best].to_f32() {
                best = i;
            }
        }
        let (i, _) = top1(&t, f16_bytes(&x).bytes()).unwrap();
        assert_eq!(x[i].to_f32(), x[best].to_f32());
        assert_eq!(i, best);
    }
}

// ------------------------------------------------------ check_layer rejects

fn expect_layer_err(r: Result<(), Error>) {
    match r {
        Err(Error::Layer { index: 7, .. }) => {}
        other => panic!("expected a layer error for layer 7, got {other:?}"),
    }
}

#[test]
fn accumulator_bound_is_exact() {
    // Dense 2 → 2 with weights [[1, −2], [0, 1]]: Σ|w| = 3 and 1.
    // Channel 0 bound: |bias| + 255·3 = |bias| + 765 ≤ 2^31 − 1.
    let w = [1i8, -2, 0, 1];
    let rq = [1 << 30, 31, 1 << 30, 31];
    let (ta, to) = (i8t(1, 1, 2, 0), i8t(1, 1, 2, 0));
    let ok_bias = [i32::MAX - 765, -(i32::MAX - 255)];
    let l = layer(
        header(Op::Dense, Window::default()),
        Weights::I8(&w),
        Bias::I32(&ok_bias),
        Params::Requant(&rq),
    );
    check_layer(7, &l, &ta, None, &to).unwrap();
    // At the bound the worst-case input still gives the exact, saturated result.
    let y = run2(&l, &ta, &i8_bytes(&[127, -128]), None, &to);
    assert_eq!(as_i8(&y), [127, -128]);
    for (bias, channel) in [([i32::MAX - 764, 0], 0), ([0, -(i32::MAX - 254)], 1)] {
        let l = layer(
            header(Op::Dense, Window::default()),
            Weights::I8(&w),
            Bias::I32(&bias),
            Params::Requant(&rq),
        );
        assert_eq!(
            check_layer(7, &l, &ta, None, &to),
            Err(Error::AccumulatorOverflow { layer: 7, channel })
        );
    }
}

#[test]
fn check_layer_rejects_bad_layers() {
    let ta = i8t(2, 2, 2, 3);
    let to = i8t(2, 2, 1, -4);
    let bias = [10];
    fn conv<'a>(
        w: &'a [i8],
        rq: &'a [i32],
        bias: &'a [i32],
        win: Window,
        clamp: [i32; 2],
    ) -> LayerRef<'a> {
        let mut h = header(Op::Conv2d, win);
        h.clamp_i8 = clamp;
        layer(h, Weights::I8(w), Bias::I32(bias), Params::Requant(rq))
    }
    let conv = |w, rq, win, clamp| conv(w, rq, &bias, win, clamp);
    // The good layer passes.
    check_layer(
        7,
        &conv(&CONV_W, &[1 << 30, 31], conv_window(), FULL_I8),
        &ta,
        None,
        &to,
    )
    .unwrap();
    // rshift 0 and 63, negative multiplier.
    for rq in [&[1 << 30, 0][..], &[1 << 30, 63], &[-1, 31]] {
        expect_layer_err(check_layer(
            7,
            &conv(&CONV_W, rq, conv_window(), FULL_I8),
            &ta,
            None,
            &to,
        ));
    }
    // Too few requant pairs.
    expect_layer_err(check_layer(
        7,
        &conv(&CONV_W, &[1 << 30], conv_window(), FULL_I8),
        &ta,
        None,
        &to,
    ));
    // Clamp unordered or outside int8.
    for c in [[5, 4], [-129, 0], [0, 128]] {
        expect_layer_err(check_layer(
            7,
            &conv(&CONV_W, &[1 << 30, 31], conv_window(), c),
            &ta,
            None,
            &to,
        ));
    }
    // Weight length wrong.
    expect_layer_err(check_layer(
        7,
        &conv(&CONV_W[..7], &[1 << 30, 31], conv_window(), FULL_I8),
        &ta,
        None,
        &to,
    ));
    // Output shape disagrees with the window (no padding → 1×1, not 2×2).
    let valid = window(2, 2, 1, 1, 1, 1, [0; 4]);
    expect_layer_err(check_layer(
        7,
        &conv(&CONV_W, &[1 << 30, 31], valid, FULL_I8),
        &ta,
        None,
        &to,
    ));
    // Input zero point outside int8.
    expect_layer_err(check_layer(
        7,
        &conv(&CONV_W, &[1 << 30, 31], conv_window(), FULL_I8),
        &i8t(2, 2, 2, 200),
        None,
        &to,
    ));
    // Element types: fp16 input into an int8 conv.
    expect_layer_err(check_layer(
        7,
        &conv(&CONV_W, &[1 << 30, 31], conv_window(), FULL_I8),
        &f16t(2, 2, 2),
        None,
        &to,
    ));

    // Average pooling whose first window lies entirely in the padding:
    // k = 2, pad 2 → taps −2, −1 for output 0.
    let win = window(2, 2, 1, 1, 1, 1, [2, 2, 0, 0]);
    let l = layer(
        header(Op::AvgPool, win),
        Weights::None,
        Bias::None,
        Params::None,
    );
    let (pi, po) = (i8t(3, 3, 1, 0), i8t(4, 4, 1, 0));
    expect_layer_err(check_layer(7, &l, &pi, None, &po));
    // int8 pooling with different quantization in and out.
    let l = layer(
        header(Op::MaxPool, pool_window()),
        Weights::None,
        Bias::None,
        Params::None,
    );
    expect_layer_err(check_layer(7, &l, &i8t(3, 3, 1, 0), None, &i8t(2, 2, 1, 1)));
    // Pixels offset i32::MIN.
    let p = [i32::MIN, 1 << 30, 30];
    let l = layer(
        header(Op::Pixels, Window::default()),
        Weights::None,
        Bias::None,
        Params::I32(&p),
    );
    expect_layer_err(check_layer(
        7,
        &l,
        &rec(1, 1, 1, ElemType::U8, 1.0, 0),
        None,
        &i8t(1, 1, 1, 0),
    ));
    // Add without its second input, and with mismatched shapes.
    let p = [1 << 30, 1 << 30, 31];
    let l = layer(
        header(Op::Add, Window::default()),
        Weights::None,
        Bias::None,
        Params::I32(&p),
    );
    let t = i8t(1, 1, 4, 0);
    expect_layer_err(check_layer(7, &l, &t, None, &t));
    expect_layer_err(check_layer(7, &l, &t, Some(&i8t(1, 1, 3, 0)), &t));
    // Quantize to a zero scale; fp16 clamp with NaN.
    let l = layer(
        header(Op::Quantize, Window::default()),
        Weights::None,
        Bias::None,
        Params::None,
    );
    expect_layer_err(check_layer(
        7,
        &l,
        &f16t(1, 1, 4),
        None,
        &rec(1, 1, 4, ElemType::I8, 0.0, 0),
    ));
    let mut h = header(Op::Dequantize, Window::default());
    h.clamp_f32 = [f32::NAN, 1.0];
    let l = layer(h, Weights::None, Bias::None, Params::None);
    expect_layer_err(check_layer(7, &l, &i8t(1, 1, 4, 0), None, &f16t(1, 1, 4)));
}

#[test]
fn run_layer_refuses_wrong_slices_without_panicking() {
    let bias = [10];
    let rq = [1 << 30, 31];
    let l = layer(
        header(Op::Conv2d, conv_window()),
        Weights::I8(&CONV_W),
        Bias::I32(&bias),
        Params::Requant(&rq),
    );
    let (ta, to) = (i8t(2, 2, 2, 3), i8t(2, 2, 1, -4));
    let mut y = [0u8; 4];
    assert!(run_layer(&l, (&ta, &[0u8; 7]), None, (&to, &mut y)).is_err());
    assert!(run_layer(&l, (&ta, &[0u8; 8]), None, (&to, &mut y[..3])).is_err());
    // Misaligned fp16 bytes are an error value, not a panic.
    let lf = layer(
        header(Op::Dequantize, Window::default()),
        Weights::None,
        Bias::None,
        Params::None,
    );
    let mut out = Buf::zeros(9);
    let r = run_layer(
        &lf,
        (&ta, &[0u8; 8]),
        None,
        (&f16t(1, 1, 4), &mut out.bytes_mut()[1..9]),
    );
    assert!(r.is_err());
}

// --------------------------------------------- fast paths vs the reference

#[derive(Debug)]
struct Case {
    xs: Shape,
    ys: Shape,
    win: Window,
}

/// A random windowed layer shape that fits.
fn random_case(rng: &mut ChaCha8Rng, depthwise: bool) -> Case {
    loop {
        let k = (rng.gen_range(1..=4), rng.gen_range(1..=4));
        let pointwise = rng.gen_bool(0.25);
        let (k, s, d, pad) = if pointwise {
            ((1, 1), (1, 1), (1, 1), [0; 4])
        } else {
            (
                k,
                (rng.gen_range(1..=3), rng.gen_range(1..=3)),
                (rng.gen_range(1..=2), rng.gen_range(1..=2)),
                [0; 4].map(|_| rng.gen_range(0..=2)),
            )
        };
        let win = window(k.0, k.1, s.0, s.1, d.0, d.1, pad);
        let (ih, iw) = (rng.gen_range(1..=9), rng.gen_range(1..=9));
        let ic = rng.gen_range(1..=20);
        let oc = if depthwise { ic } else { rng.gen_range(1..=6) };
        if let Some((oh, ow)) = win.output_hw(ih, iw) {
            return Case {
                xs: Shape::new(ih, iw, ic),
                ys: Shape::new(oh, ow, oc),
                win,
            };
        }
    }
}

#[allow(clippy::too_many_arguments)]
/// Independent int8 conv: copy the input into a zero-point-filled padded
/// array, then take plain windows of it (no tap arithmetic shared with the
/// runtime), accumulate in i64 and requantize by the documented formula.
fn padded_conv_i8(
    x: &[i8],
    c: &Case,
    w: &[i8],
    bias: &[i32],
    rq: &[i32],
    zp_in: i32,
    zp_out: i32,
    depthwise: bool,
) -> Vec<i8> {
    let (ih, iw, ic) = (c.xs.h as usize, c.xs.w as usize, c.xs.c as usize);
    let (oh, ow, oc) = (c.ys.h as usize, c.ys.w as usize, c.ys.c as usize);
    let win = &c.win;
    let ph = ih + win.pad_top as usize + win.pad_bottom as usize;
    let pw = iw + win.pad_left as usize + win.pad_right as usize;
    let mut padded = vec![zp_in as i64; ph * pw * ic];
    for y in 0..ih {
        for xx in 0..iw {
            for ch in 0..ic {
                let py = y + win.pad_top as usize;
                let px = xx + win.pad_left as usize;
                padded[(py * pw + px) * ic + ch] = x[(y * iw + xx) * ic + ch] as i64;
            }
        }
    }
    let (kh, kw) = (win.kh as usize, win.kw as usize);
    let mut out = Vec::new();
    for oy in 0..oh {
        for ox in 0..ow {
            for o in 0..oc {
                let mut acc = bias[o] as i64;
                for ky in 0..kh {
                    for kx in 0..kw {
                        let py = oy * win.stride_h as usize + ky * win.dil_h as usize;
                        let px = ox * win.stride_w as usize + kx * win.dil_w as usize;
                        if depthwise {
                            acc +=
                                padded[(py * pw + px) * ic + o] * w[(ky * kw + kx) * oc + o] as i64;
                        } else {
                            for i in 0..ic {
                                acc += padded[(py * pw + px) * ic + i]
                                    * w[((o * kh + ky) * kw + kx) * ic + i] as i64;
                            }
                        }
                    }
                }
                let (m, s) = (rq[2 * o] as i128, rq[2 * o + 1]);
                let r = (2 * acc as i128 * m + (1i128 << s)).div_euclid(1i128 << (s + 1));
                out.push((zp_out as i128 + r).clamp(-128, 127) as i8);
            }
        }
    }
    out
}

fn random_int8_layer(rng: &mut ChaCha8Rng, op: Op) {
    let depthwise = op == Op::Depthwise;
    let c = random_case(rng, depthwise);
    let (ic, oc) = (c.xs.c as usize, c.ys.c as usize);
    let n_w = if depthwise {
        c.win.kh as usize * c.win.kw as usize * oc
    } else {
        oc * c.win.kh as usize * c.win.kw as usize * ic
    };
    let w: Vec<i8> = (0..n_w).map(|_| rng.gen()).collect();
    let x: Vec<i8> = (0..c.xs.elems()).map(|_| rng.gen()).collect();
    let bias: Vec<i32> = (0..oc).map(|_| rng.gen_range(-5000..=5000)).collect();
    let rq: Vec<i32> = (0..oc)
        .flat_map(|_| [rng.gen_range(1 << 30..=i32::MAX), rng.gen_range(40..=48)])
        .collect();
    let (zp_in, zp_out) = (rng.gen_range(-128..=127), rng.gen_range(-128..=127));
    let mut h = header(op, c.win);
    let lo = rng.gen_range(-128..=0);
    h.clamp_i8 = [lo, rng.gen_range(lo..=127)];
    let l = layer(h, Weights::I8(&w), Bias::I32(&bias), Params::Requant(&rq));
    let ta = rec(c.xs.h, c.xs.w, c.xs.c, ElemType::I8, 0.1, zp_in);
    let to = rec(c.ys.h, c.ys.w, c.ys.c, ElemType::I8, 0.1, zp_out);
    let y = as_i8(&run2(&l, &ta, &i8_bytes(&x), None, &to));
    let expect: Vec<i8> = padded_conv_i8(&x, &c, &w, &bias, &rq, zp_in, zp_out, depthwise)
        .into_iter()
        .map(|q| q.clamp(h.clamp_i8[0] as i8, h.clamp_i8[1] as i8))
        .collect();
    assert_eq!(y, expect, "{op:?} {c:?}");
}

#[test]
fn conv2d_int8_fast_and_reference_agree_with_padded_copy() {
    let mut rng = ChaCha8Rng::seed_from_u64(0x5eed_0201);
    for _ in 0..300 {
        random_int8_layer(&mut rng, Op::Conv2d);
    }
}

#[test]
fn depthwise_int8_fast_and_reference_agree_with_padded_copy() {
    let mut rng = ChaCha8Rng::seed_from_u64(0x5eed_0202);
    for _ in 0..300 {
        random_int8_layer(&mut rng, Op::Depthwise);
    }
}

#[test]
fn fp16_windowed_fast_paths_match_reference() {
    // fp16 fast paths sum in the same order as the reference, so they agree
    // bit for bit (run2 asserts it); outputs are also checked against an f64
    // sum within the f32/f16 rounding.
    let mut rng = ChaCha8Rng::seed_from_u64(0x5eed_0203);
    for i in 0..300 {
        let op = if i % 2 == 0 {
            Op::Conv2d
        } else {
            Op::Depthwise
        };
        let c = random_case(&mut rng, op == Op::Depthwise);
        let (ic, oc) = (c.xs.c as usize, c.ys.c as usize);
        let taps = c.win.kh as usize * c.win.kw as usize;
        let n_w = if op == Op::Depthwise {
            taps * oc
        } else {
            oc * taps * ic
        };
        let w: Vec<f16> = (0..n_w)
            .map(|_| f16::from_f32(rng.gen_range(-1.0..1.0)))
            .collect();
        let x: Vec<f16> = (0..c.xs.elems())
            .map(|_| f16::from_f32(rng.gen_range(-4.0..4.0)))
            .collect();
        let bias: Vec<f32> = (0..oc).map(|_| rng.gen_range(-2.0..2.0)).collect();
        let l = layer(
            header(op, c.win),
            Weights::F16(&w),
            Bias::F32(&bias),
            Params::None,
        );
        let ta = f16t(c.xs.h, c.xs.w, c.xs.c);
        let to = f16t(c.ys.h, c.ys.w, c.ys.c);
        let y = as_f32(&run2(&l, &ta, &f16_bytes(&x), None, &to));
        // f64 check of the first output pixel (padded taps read 0).
        let win = &c.win;
        for o in 0..oc {
            let mut acc = bias[o] as f64;
            let mut mag = acc.abs();
            for ky in 0..win.kh as i64 {
                for kx in 0..win.kw as i64 {
                    let iy = ky * win.dil_h as i64 - win.pad_top as i64;
                    let ix = kx * win.dil_w as i64 - win.pad_left as i64;
                    if iy < 0 || ix < 0 || iy >= c.xs.h as i64 || ix >= c.xs.w as i64 {
                        continue;
                    }
                    let base = (iy as usize * c.xs.w as usize + ix as usize) * ic;
                    let chans: Vec<usize> = if op == Op::Depthwise {
                        vec![o]
                    } else {
                        (0..ic).collect()
                    };
                    for i in chans {
                        let wi = if op == Op::Depthwise {
                            (ky as usize * win.kw as usize + kx as usize) * oc + o
                        } else {
                            ((o * win.kh as usize + ky as usize) * win.kw as usize + kx as usize)
                                * ic
                                + i
                        };
                        let p = x[base + i].to_f64() * w[wi].to_f64();
                        acc += p;
                        mag += p.abs();
                    }
                }
            }
            // f16 storage: ≤ 2^−11 relative; f32 accumulation: ≤ n·2^−24·Σ|terms|.
            let n = (taps * ic + 1) as f64;
            let tol = acc.abs() * 2f64.powi(-11) + mag * n * 2f64.powi(-24) * 1.01 + 2f64.powi(-24);
            assert!(
                (y[o] as f64 - acc).abs() <= tol,
                "{op:?} {c:?} o={o}: {} vs {acc}",
                y[o]
            );
        }
    }
}

#[test]
fn dense_fast_matches_reference() {
    let mut rng = ChaCha8Rng::seed_from_u64(0x5eed_0204);
    for _ in 0..200 {
        let xs = Shape::new(
            rng.gen_range(1..=4),
            rng.gen_range(1..=4),
            rng.gen_range(1..=8),
        );
        let n_out = rng.gen_range(1..=10);
        let n_in = xs.elems();
        let w: Vec<i8> = (0..n_in * n_out).map(|_| rng.gen()).collect();
        let x: Vec<i8> = (0..n_in).map(|_| rng.gen()).collect();
        let bias: Vec<i32> = (0..n_out).map(|_| rng.gen_range(-1000..=1000)).collect();
        let rq: Vec<i32> = (0..n_out)
            .flat_map(|_| [rng.gen_range(1 << 30..=i32::MAX), 40])
            .collect();
        let l = layer(
            header(Op::Dense, Window::default()),
            Weights::I8(&w),
            Bias::I32(&bias),
            Params::Requant(&rq),
        );
        let ta = rec(xs.h, xs.w, xs.c, ElemType::I8, 0.1, 0);
        let to = i8t(1, 1, n_out as u16, 0);
        run2(&l, &ta, &i8_bytes(&x), None, &to);
        let wf: Vec<f16> = w.iter().map(|&v| f16::from_f32(v as f32 / 64.0)).collect();
        let xf: Vec<f16> = x.iter().map(|&v| f16::from_f32(v as f32 / 64.0)).collect();
        let bf: Vec<f32> = bias.iter().map(|&b| b as f32 / 100.0).collect();
        let l = layer(
            header(Op::Dense, Window::default()),
            Weights::F16(&wf),
            Bias::F32(&bf),
            Params::None,
        );
        run2(
            &l,
            &f16t(xs.h, xs.w, xs.c),
            &f16_bytes(&xf),
            None,
            &f16t(1, 1, n_out as u16),
        );
    }
}

// ------------------------------------------- never panic on arbitrary layers

/// Owned storage of one generated layer.
struct Gen {
    op: Op,
    ta: TensorRecord,
    tb: TensorRecord,
    to: TensorRecord,
    two: bool,
    header: LayerHeader,
    wk: u8,
    wi8: Vec<i8>,
    wf16: Vec<f16>,
    bk: u8,
    bi32: Vec<i32>,
    bf32: Vec<f32>,
    pk: u8,
    pi32: Vec<i32>,
    pf32: Vec<f32>,
}

impl Gen {
    fn layer(&self) -> LayerRef<'_> {
        LayerRef {
            header: self.header,
            weights: match self.wk {
                0 => Weights::None,
                1 => Weights::I8(&self.wi8),
                _ => Weights::F16(&self.wf16),
            },
            bias: match self.bk {
                0 => Bias::None,
                1 => Bias::I32(&self.bi32),
                _ => Bias::F32(&self.bf32),
            },
            params: match self.pk {
                0 => Params::None,
                1 => Params::Requant(&self.pi32),
                2 => Params::I32(&self.pi32),
                _ => Params::F32(&self.pf32),
            },
        }
    }
}

/// A plausible layer of a random op (usually valid).
fn plausible(rng: &mut ChaCha8Rng) -> Gen {
    let ops = [
        Op::Pixels,
        Op::Conv2d,
        Op::Depthwise,
        Op::MaxPool,
        Op::AvgPool,
        Op::GlobalAvgPool,
        Op::Dense,
        Op::Add,
        Op::Quantize,
        Op::Dequantize,
    ];
    loop {
        let op = ops[rng.gen_range(0..ops.len())];
        let p = if rng.gen() {
            ElemType::I8
        } else {
            ElemType::F16
        };
        let (ein, eout) = match op {
            Op::Pixels => (ElemType::U8, p),
            Op::Quantize => (ElemType::F16, ElemType::I8),
            Op::Dequantize => (ElemType::I8, ElemType::F16),
            _ => (p, p),
        };
        let q = Quant {
            scale: 0.25,
            zero_point: rng.gen_range(-128..=127),
        };
        let xs = Shape::new(
            rng.gen_range(1..=5),
            rng.gen_range(1..=5),
            rng.gen_range(1..=4),
        );
        let win = window(
            rng.gen_range(1..=3),
            rng.gen_range(1..=3),
            rng.gen_range(1..=2),
            rng.gen_range(1..=2),
            rng.gen_range(1..=2),
            rng.gen_range(1..=2),
            [0; 4].map(|_| rng.gen_range(0..=1)),
        );
        let oc = rng.gen_range(1..=4u16);
        let ys = match op {
            Op::Conv2d | Op::Depthwise | Op::MaxPool | Op::AvgPool => {
                let Some((oh, ow)) = win.output_hw(xs.h, xs.w) else {
                    continue;
                };
                let c = if op == Op::Conv2d { oc } else { xs.c };
                Shape::new(oh, ow, c)
            }
            Op::GlobalAvgPool => Shape::new(1, 1, xs.c),
            Op::Dense => Shape::new(1, 1, oc),
            _ => xs,
        };
        let (ic, ocu) = (xs.c as usize, ys.c as usize);
        let taps = win.kh as usize * win.kw as usize;
        let n_w = match op {
            Op::Conv2d => ocu * taps * ic,
            Op::Depthwise => taps * ocu,
            Op::Dense => xs.elems() * ocu,
            _ => 0,
        };
        let weighted = n_w > 0;
        let int8 = eout == ElemType::I8;
        let n_p = match (op, int8) {
            (Op::Pixels, true) => 3 * ic,
            (Op::Pixels, false) => 2 * ic,
            (Op::Add, true) => 3,
            (Op::Conv2d | Op::Depthwise | Op::Dense, true) => 2 * ocu,
            _ => 0,
        };
        let pi32 = (0..n_p)
            .map(|i| {
                if (op == Op::Pixels && i % 3 == 0) || (op != Op::Pixels && i % 2 == 0) {
                    rng.gen_range(0..=i32::MAX)
                } else {
                    rng.gen_range(1..=62)
                }
            })
            .collect::<Vec<i32>>();
        let pi32 = if op == Op::Add && int8 {
            vec![
                rng.gen_range(0..=i32::MAX),
                rng.gen_range(0..=i32::MAX),
                rng.gen_range(1..=62),
            ]
        } else {
            pi32
        };
        let ta = TensorRecord {
            shape: xs,
            elem: ein,
            quant: q,
            offset: 0,
        };
        let mut to = TensorRecord {
            shape: ys,
            elem: eout,
            quant: q,
            offset: 0,
        };
        if !matches!(op, Op::MaxPool | Op::AvgPool | Op::GlobalAvgPool) {
            to.quant.zero_point = rng.gen_range(-128..=127);
        }
        let mut header = header(op, win);
        let lo = rng.gen_range(-128..=127);
        header.clamp_i8 = [lo, rng.gen_range(lo..=127)];
        return Gen {
            op,
            ta,
            tb: ta,
            to,
            two: op == Op::Add,
            header,
            wk: if !weighted {
                0
            } else if int8 {
                1
            } else {
                2
            },
            wi8: (0..n_w).map(|_| rng.gen()).collect(),
            wf16: (0..n_w)
                .map(|_| f16::from_f32(rng.gen_range(-2.0..2.0)))
                .collect(),
            bk: if !weighted {
                0
            } else if int8 {
                1
            } else {
                2
            },
            bi32: (0..ocu).map(|_| rng.gen_range(-10_000..=10_000)).collect(),
            bf32: (0..ocu).map(|_| rng.gen_range(-1.0..1.0)).collect(),
            pk: if n_p == 0 {
                0
            } else if int8 {
                1
            } else {
                3
            },
            pf32: (0..n_p).map(|_| rng.gen_range(-2.0..2.0)).collect(),
            pi32,
        };
    }
}

/// One random corruption of a field.
fn corrupt(g: &mut Gen, rng: &mut ChaCha8Rng) {
    let elems = [ElemType::U8, ElemType::I8, ElemType::F16];
    let any16 = |rng: &mut ChaCha8Rng| rng.gen_range(0..=4u16);
    match rng.gen_range(0..14) {
        0 => g.ta.elem = elems[rng.gen_range(0..3)],
        1 => g.to.elem = elems[rng.gen_range(0..3)],
        2 => g.to.shape = Shape::new(any16(rng), any16(rng), any16(rng)),
        3 => g.ta.shape = Shape::new(any16(rng), any16(rng), any16(rng)),
        4 => {
            let w = &mut g.header.window;
            match rng.gen_range(0..6) {
                0 => w.kh = any16(rng),
                1 => w.stride_w = any16(rng),
                2 => w.dil_h = any16(rng),
                3 => w.pad_left = any16(rng) * 2,
                4 => w.pad_bottom = any16(rng) * 2,
                _ => w.kw = any16(rng),
            }
        }
        5 => {
            let n = rng.gen_range(0..=g.wi8.len());
            g.wi8.truncate(n);
            g.wf16.truncate(n);
        }
        6 => g.wk = rng.gen_range(0..3),
        7 => g.bk = rng.gen_range(0..3),
        8 => g.pk = rng.gen_range(0..4),
        9 => {
            if !g.pi32.is_empty() {
                let i = rng.gen_range(0..g.pi32.len());
                g.pi32[i] = rng.gen();
            }
        }
        10 => g.header.clamp_i8 = [rng.gen_range(-300..=300), rng.gen_range(-300..=300)],
        11 => g.to.quant.zero_point = rng.gen_range(-1000..=1000),
        12 => g.two = !g.two,
        _ => {
            g.bi32.iter_mut().for_each(|b| *b = rng.gen());
            g.header.clamp_f32 = [rng.gen_range(-9.0..9.0), f32::NAN];
        }
    }
}

/// Random layers, mostly plausible and often corrupted: `check_layer`,
/// `run_layer` and the reference never panic; whenever `check_layer`
/// accepts, both runs succeed and agree (the contract `Model::run` relies on).
#[test]
fn arbitrary_layers_never_panic_and_checked_layers_always_run() {
    let mut rng = ChaCha8Rng::seed_from_u64(0x5eed_0301);
    let (mut accepted, mut rejected) = (0, 0);
    for _ in 0..6000 {
        let mut g = plausible(&mut rng);
        for _ in 0..rng.gen_range(0..=2) {
            corrupt(&mut g, &mut rng);
        }
        let l = g.layer();
        let (ta, tb, to) = (g.ta, g.tb, g.to);
        let checked = check_layer(3, &l, &ta, g.two.then_some(&tb), &to);
        let rand_buf = |rng: &mut ChaCha8Rng, len: usize| {
            let v: Vec<u8> = (0..len).map(|_| rng.gen()).collect();
            Buf::from_bytes(&v)
        };
        let xa = rand_buf(&mut rng, ta.byte_len());
        let xb = rand_buf(&mut rng, tb.byte_len());
        let bb = g.two.then_some((&tb, xb.bytes()));
        let mut y1 = Buf::zeros(to.byte_len());
        let mut y2 = Buf::zeros(to.byte_len());
        let r1 = run_layer(&l, (&ta, xa.bytes()), bb, (&to, y1.bytes_mut()));
        let r2 = run_layer_reference(&l, (&ta, xa.bytes()), bb, (&to, y2.bytes_mut()));
        match checked {
            Ok(()) => {
                accepted += 1;
                assert!(
                    r1.is_ok() && r2.is_ok(),
                    "{:?} {l:?} {ta:?} {to:?}: {r1:?} {r2:?}",
                    g.op
                );
                // Random fp16 inputs may hold NaNs whose payloads can differ;
                // compare int8 outputs bit for bit, fp16 outputs as values.
                if to.elem == ElemType::I8 {
                    assert_eq!(y1.bytes(), y2.bytes(), "{l:?}");
                } else {
                    let (f1, f2) = (as_f32(&y1), as_f32(&y2));
                    for (a, b) in f1.iter().zip(&f2) {
                        assert!(a == b || (a.is_nan() && b.is_nan()), "{l:?}: {a} vs {b}");
                    }
                }
            }
            Err(_) => rejected += 1,
        }
        // A wrong-length output slice is refused, not a panic.
        if to.byte_len() > 0 {
            let mut short = Buf::zeros(to.byte_len() - 1);
            assert!(run_layer(&l, (&ta, xa.bytes()), bb, (&to, short.bytes_mut())).is_err());
        }
    }
    // The generator must reach both sides of the check.
    assert!(
        accepted > 1000 && rejected > 1000,
        "accepted {accepted}, rejected {rejected}"
    );
}
