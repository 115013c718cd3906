//! The invented demo scenario: an inline camera on a bottling line looks down
//! at bottle caps. A seeded procedural generator renders 32×32 greyscale views
//! of four classes (sealed, missing, tilted, torn) with varied pose and optics.

use std::f32::consts::PI;
use std::path::Path;

use midge_convert::Result;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

use crate::images::GreySet;

/// Image side in pixels.
pub const SIDE: usize = 32;
/// Class folder names, in class-index order.
pub const CLASS_NAMES: [&str; 4] = ["sealed", "missing", "tilted", "torn"];
/// Seeds of the three image streams; the trainer draws fresh training images
/// from `TRAIN_SEED` every epoch, the committed PNGs come from the other two.
pub const TRAIN_SEED: u64 = 0xCA95_0001;
pub const CALIBRATION_SEED: u64 = 0xCA95_0002;
pub const VALIDATION_SEED: u64 = 0xCA95_0003;
/// Committed set sizes.
pub const CALIBRATION: usize = 100;
pub const VALIDATION: usize = 400;

/// The four states the inspection camera tells apart.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Cap {
    /// Full round cap with its rim.
    Sealed = 0,
    /// No cap: the bottle neck opening and its thread are visible.
    Missing = 1,
    /// Cap sits askew: seen as an ellipse, side wall showing, opening peeking out.
    Tilted = 2,
    /// Cap present but torn: a jagged dark tear or a missing sector.
    Torn = 3,
}

impl Cap {
    pub const ALL: [Cap; 4] = [Cap::Sealed, Cap::Missing, Cap::Tilted, Cap::Torn];
}

/// Class of image `index` in any stream: classes cycle so every block of four is balanced.
pub fn class_of(index: u64) -> Cap {
    Cap::ALL[(index % 4) as usize]
}

/// Renders image `index` of the stream `seed`. Each image has its own ChaCha8
/// stream (`seed`, stream = `index`), so any image can be drawn alone.
pub fn render(seed: u64, index: u64) -> (Vec<u8>, Cap) {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(index);
    let cap = class_of(index);
    let mut canvas = Canvas::new();
    let scene = Scene::draw(&mut rng);
    canvas.fill(scene.background);
    // Bottle shoulder around the neck, a little brighter or darker than the belt.
    canvas.disk(
        scene.cx,
        scene.cy,
        scene.r + rng.gen_range(2.5..5.5),
        scene.shoulder,
    );
    match cap {
        Cap::Sealed => sealed(&mut canvas, &scene, &mut rng),
        Cap::Missing => missing(&mut canvas, &scene, &mut rng),
        Cap::Tilted => tilted(&mut canvas, &scene, &mut rng),
        Cap::Torn => {
            sealed(&mut canvas, &scene, &mut rng);
            torn(&mut canvas, &scene, &mut rng);
        }
    }
    canvas.optics(&mut rng);
    (canvas.to_bytes(), cap)
}

/// `count` images of stream `seed`, starting at image `start`.
pub fn generate(seed: u64, start: u64, count: usize) -> GreySet {
    let mut set = GreySet::new(SIDE, SIDE);
    for i in 0..count as u64 {
        let (img, cap) = render(seed, start + i);
        set.push(&img, cap as usize);
    }
    set
}

/// Writes `<dir>/calib/*.png` (100) and `<dir>/val/<class>/*.png` (400, 100 per class).
pub fn export(dir: &Path) -> Result<(GreySet, GreySet)> {
    let calib = generate(CALIBRATION_SEED, 0, CALIBRATION);
    let val = generate(VALIDATION_SEED, 0, VALIDATION);
    calib.write_flat(&dir.join("calib"), "c")?;
    val.write_by_label(&dir.join("val"), &CLASS_NAMES, "v")?;
    Ok((calib, val))
}

/// The trainer's endless source: epoch `e` draws images `e·per_epoch ..` of
/// the [`TRAIN_SEED`] stream, so no image repeats and none is in the committed sets.
pub struct TrainStream {
    pub per_epoch: usize,
}

impl crate::fit::TrainSource for TrainStream {
    fn epoch(&mut self, epoch: usize) -> GreySet {
        generate(TRAIN_SEED, (epoch * self.per_epoch) as u64, self.per_epoch)
    }
}

/// Pose and grey levels shared by every class.
struct Scene {
    cx: f32,
    cy: f32,
    r: f32,
    background: f32,
    shoulder: f32,
    cap: f32,
    /// Direction of the light (radians), used for highlights.
    light: f32,
}

impl Scene {
    fn draw(rng: &mut ChaCha8Rng) -> Scene {
        let background = rng.gen_range(25.0..100.0);
        Scene {
            cx: SIDE as f32 / 2.0 + rng.gen_range(-3.5..3.5),
            cy: SIDE as f32 / 2.0 + rng.gen_range(-3.5..3.5),
            r: rng.gen_range(8.5..12.0),
            background,
            shoulder: background + rng.gen_range(-15.0..25.0),
            cap: background + rng.gen_range(60.0..140.0),
            light: rng.gen_range(0.0..2.0 * PI),
        }
    }
}

fn sealed(c: &mut Canvas, s: &Scene, rng: &mut ChaCha8Rng) {
    c.disk(s.cx, s.cy, s.r, s.cap);
    // Knurled rim: a darker ring whose grey level ripples with the angle.
    let rim = rng.gen_range(1.2..2.2);
    let ridges = rng.gen_range(14..28) as f32;
    let depth = rng.gen_range(20.0..50.0);
    let ripple = rng.gen_range(5.0..15.0);
    c.paint(|x, y| {
        let (dx, dy) = (x - s.cx, y - s.cy);
        let d = dx.hypot(dy);
        let cov = coverage(s.r - d) * coverage(d - (s.r - rim));
        let v = s.cap - depth + ripple * (ridges * dy.atan2(dx)).cos();
        (cov, v)
    });
    // Embossed ring on the top face.
    let ring = s.r * rng.gen_range(0.5..0.7);
    let emboss = rng.gen_range(-18.0..18.0);
    c.paint(|x, y| {
        let d = (x - s.cx).hypot(y - s.cy);
        (coverage(0.6 - (d - ring).abs()), s.cap + emboss)
    });
    highlight(c, s, 0.0, rng);
}

fn missing(c: &mut Canvas, s: &Scene, rng: &mut ChaCha8Rng) {
    let outer = s.r * rng.gen_range(0.78..0.92);
    let inner = s.r * rng.gen_range(0.5..0.62);
    let lip = s.cap - rng.gen_range(0.0..40.0);
    // Thread band outside the lip: bright and dark stripes slanting with the angle.
    let band = outer + rng.gen_range(1.2..2.8);
    let turns = rng.gen_range(2..4) as f32;
    let phase = rng.gen_range(0.0..2.0 * PI);
    let thread = lip - rng.gen_range(10.0..40.0);
    c.paint(|x, y| {
        let (dx, dy) = (x - s.cx, y - s.cy);
        let d = dx.hypot(dy);
        let stripe = (turns * dy.atan2(dx) + 2.2 * d + phase).sin();
        (coverage(band - d), thread + 22.0 * stripe)
    });
    c.disk(s.cx, s.cy, outer, lip);
    // The opening: dark, a little lighter towards one side where light falls in.
    let dark = rng.gen_range(5.0..45.0);
    let spill = rng.gen_range(0.0..25.0);
    c.paint(|x, y| {
        let (dx, dy) = (x - s.cx, y - s.cy);
        let d = dx.hypot(dy);
        let toward = (dx * s.light.cos() + dy * s.light.sin()) / inner;
        (coverage(inner - d), dark + spill * toward.max(0.0))
    });
}

fn tilted(c: &mut Canvas, s: &Scene, rng: &mut ChaCha8Rng) {
    // The opening peeks out on the side the cap lifts from.
    let tilt_dir = rng.gen_range(0.0..2.0 * PI);
    let (tx, ty) = (tilt_dir.cos(), tilt_dir.sin());
    let shift = rng.gen_range(1.5..4.0);
    c.disk(
        s.cx,
        s.cy,
        s.r * rng.gen_range(0.55..0.7),
        rng.gen_range(5.0..45.0),
    );
    // The cap: an ellipse squeezed along the tilt direction, moved away from the opening.
    let squeeze = rng.gen_range(0.62..0.88);
    let (ex, ey) = (s.cx + shift * tx, s.cy + shift * ty);
    let (a, b) = (s.r, s.r * squeeze);
    let wall = s.cap - rng.gen_range(35.0..70.0);
    c.ellipse(ex, ey, a, b, tilt_dir, wall);
    // The top face sits off-centre inside the outline; the side wall shows as a crescent.
    let lift = (a - b) * rng.gen_range(0.5..0.9);
    c.ellipse(
        ex + lift * tx,
        ey + lift * ty,
        a - 1.2,
        b - 1.0,
        tilt_dir,
        s.cap,
    );
    highlight(c, s, shift + lift, rng);
}

fn torn(c: &mut Canvas, s: &Scene, rng: &mut ChaCha8Rng) {
    let dark = rng.gen_range(10.0..55.0);
    if rng.gen_bool(0.5) {
        // Missing sector with a jagged edge.
        let mid = rng.gen_range(0.0..2.0 * PI);
        let half = rng.gen_range(0.3..0.7);
        let jag = rng.gen_range(1.0..5.0);
        let inner = s.r * rng.gen_range(0.1..0.4);
        c.paint(|x, y| {
            let (dx, dy) = (x - s.cx, y - s.cy);
            let d = dx.hypot(dy);
            let mut da = (dy.atan2(dx) - mid).abs() % (2.0 * PI);
            if da > PI {
                da = 2.0 * PI - da;
            }
            let edge = half + 0.08 * (jag * d).sin();
            let cov =
                coverage((edge - da) * d.max(1.0)) * coverage(d - inner) * coverage(s.r - 0.6 - d);
            (cov, dark)
        });
    } else {
        // A tear: a jagged line that starts near the rim and runs across the top.
        let start = rng.gen_range(0.0..2.0 * PI);
        let mut x = s.cx + s.r * 0.85 * start.cos();
        let mut y = s.cy + s.r * 0.85 * start.sin();
        let mut heading = start + PI + rng.gen_range(-0.6..0.6);
        let steps = rng.gen_range(4..9);
        let step = s.r * rng.gen_range(0.18..0.28);
        let width = rng.gen_range(0.9..2.0);
        let mut segs = Vec::with_capacity(steps);
        for _ in 0..steps {
            heading += rng.gen_range(-0.9..0.9);
            let (nx, ny) = (x + step * heading.cos(), y + step * heading.sin());
            segs.push((x, y, nx, ny));
            x = nx;
            y = ny;
        }
        let (cx, cy, r) = (s.cx, s.cy, s.r);
        c.paint(|px, py| {
            let d = segs
                .iter()
                .map(|&(ax, ay, bx, by)| segment_distance(px, py, ax, ay, bx, by))
                .fold(f32::INFINITY, f32::min);
            let inside = coverage(r - (px - cx).hypot(py - cy));
            (coverage(width / 2.0 - d) * inside, dark)
        });
    }
}

/// A soft specular spot on the top face, towards the light.
fn highlight(c: &mut Canvas, s: &Scene, extra: f32, rng: &mut ChaCha8Rng) {
    let off = s.r * rng.gen_range(0.2..0.5) + 0.3 * extra;
    let (hx, hy) = (s.cx + off * s.light.cos(), s.cy + off * s.light.sin());
    let size = rng.gen_range(1.5..3.5);
    let gain = rng.gen_range(10.0..45.0);
    c.add(|x, y| {
        let d2 = (x - hx).powi(2) + (y - hy).powi(2);
        gain * (-d2 / (2.0 * size * size)).exp()
    });
}

/// Fraction of a pixel covered by a shape whose signed edge distance is `d`
/// (positive inside): a one-pixel linear ramp, a cheap anti-aliasing.
fn coverage(d: f32) -> f32 {
    (d + 0.5).clamp(0.0, 1.0)
}

fn segment_distance(px: f32, py: f32, ax: f32, ay: f32, bx: f32, by: f32) -> f32 {
    let (vx, vy) = (bx - ax, by - ay);
    let len2 = vx * vx + vy * vy;
    let t = if len2 > 0.0 {
        (((px - ax) * vx + (py - ay) * vy) / len2).clamp(0.0, 1.0)
    } else {
        0.0
    };
    (px - ax - t * vx).hypot(py - ay - t * vy)
}

fn gaussian(rng: &mut ChaCha8Rng) -> f32 {
    // Box–Muller transform (common practice).
    let u1: f32 = rng.gen_range(f32::EPSILON..1.0);
    let u2: f32 = rng.gen();
    (-2.0 * u1.ln()).sqrt() * (2.0 * PI * u2).cos()
}

/// A float grey canvas; pixel centres sit at (x + 0.5, y + 0.5).
struct Canvas {
    px: Vec<f32>,
}

impl Canvas {
    fn new() -> Self {
        Canvas {
            px: vec![0.0; SIDE * SIDE],
        }
    }

    fn fill(&mut self, v: f32) {
        self.px.fill(v);
    }

    /// Blends `value` over each pixel with the coverage the closure returns.
    fn paint(&mut self, f: impl Fn(f32, f32) -> (f32, f32)) {
        for (i, p) in self.px.iter_mut().enumerate() {
            let (x, y) = ((i % SIDE) as f32 + 0.5, (i / SIDE) as f32 + 0.5);
            let (cov, v) = f(x, y);
            *p += cov * (v - *p);
        }
    }

    fn add(&mut self, f: impl Fn(f32, f32) -> f32) {
        for (i, p) in self.px.iter_mut().enumerate() {
            *p += f((i % SIDE) as f32 + 0.5, (i / SIDE) as f32 + 0.5);
        }
    }

    fn disk(&mut self, cx: f32, cy: f32, r: f32, v: f32) {
        self.paint(|x, y| (coverage(r - (x - cx).hypot(y - cy)), v));
    }

    /// Ellipse with semi-axis `b` along direction `angle` and `a` across it.
    fn ellipse(&mut self, cx: f32, cy: f32, a: f32, b: f32, angle: f32, v: f32) {
        let (co, si) = (angle.cos(), angle.sin());
        let scale = (a * b).sqrt();
        self.paint(|x, y| {
            let (dx, dy) = (x - cx, y - cy);
            let along = dx * co + dy * si;
            let across = -dx * si + dy * co;
            let rho = ((along / b).powi(2) + (across / a).powi(2)).sqrt();
            (coverage((1.0 - rho) * scale), v)
        });
    }

    /// Camera effects: lighting gradient, lens blur, gain, sensor noise.
    fn optics(&mut self, rng: &mut ChaCha8Rng) {
        let dir = rng.gen_range(0.0..2.0 * PI);
        let amp = rng.gen_range(0.0..45.0);
        let half = SIDE as f32 / 2.0;
        self.add(|x, y| amp * ((x - half) * dir.cos() + (y - half) * dir.sin()) / half);
        let sigma = rng.gen_range(0.35..1.25);
        self.blur(sigma);
        let gain = rng.gen_range(0.8..1.15);
        let noise = rng.gen_range(2.0..11.0);
        for p in &mut self.px {
            *p = *p * gain + noise * gaussian(rng);
        }
    }

    /// Separable Gaussian blur, radius 2, edges clamped.
    fn blur(&mut self, sigma: f32) {
        let k: Vec<f32> = (-2..=2)
            .map(|i| (-(i * i) as f32 / (2.0 * sigma * sigma)).exp())
            .collect();
        let sum: f32 = k.iter().sum();
        let at = |v: isize| v.clamp(0, SIDE as isize - 1) as usize;
        let mut tmp = vec![0.0; SIDE * SIDE];
        for y in 0..SIDE {
            for x in 0..SIDE {
                tmp[y * SIDE + x] = (-2..=2isize)
                    .map(|d| k[(d + 2) as usize] * self.px[y * SIDE + at(x as isize + d)])
                    .sum::<f32>()
                    / sum;
            }
        }
        for y in 0..SIDE {
            for x in 0..SIDE {
                self.px[y * SIDE + x] = (-2..=2isize)
                    .map(|d| k[(d + 2) as usize] * tmp[at(y as isize + d) * SIDE + x])
                    .sum::<f32>()
                    / sum;
            }
        }
    }

    fn to_bytes(&self) -> Vec<u8> {
        self.px
            .iter()
            .map(|&p| p.round().clamp(0.0, 255.0) as u8)
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn same_seed_gives_same_bytes() {
        let a = generate(7, 0, 12);
        let b = generate(7, 0, 12);
        assert_eq!(a, b);
        // Any image can be drawn alone and matches its place in a batch.
        assert_eq!(render(7, 5).0, a.image(5));
        // A different seed changes the pixels.
        assert_ne!(generate(8, 0, 12).pixels, a.pixels);
    }

    #[test]
    fn classes_are_balanced() {
        let set = generate(VALIDATION_SEED, 0, VALIDATION);
        assert_eq!(set.class_counts(), vec![VALIDATION / 4; 4]);
        assert_eq!(CLASS_NAMES.len(), Cap::ALL.len());
    }

    #[test]
    fn images_use_a_real_grey_range() {
        // Not blank, not saturated: every image spans a visible contrast.
        let set = generate(3, 0, 40);
        for i in 0..set.len() {
            let img = set.image(i);
            let (lo, hi) = (img.iter().min().unwrap(), img.iter().max().unwrap());
            assert!(hi - lo > 60, "image {i}: range {lo}..{hi}");
        }
    }
}
