//! Dendrite geometry: trunks, primary arms and secondary arms as shape lists.
//!
//! Layout is the only place that consumes the geometry random stream; it also
//! records the arm lattice spacings that end up in the truth record.

use super::geom::{Item, Shape, Wobble};
use super::{FieldSpec, Style};
use rand::Rng;
use rand_distr::{Distribution, StandardNormal};
use rayon::prelude::*;
use std::f64::consts::{FRAC_PI_2, TAU};

pub(crate) struct Layout {
    pub items: Vec<Item>,
    /// Centre-to-centre spacings of consecutive arm positions whose roots lie
    /// inside the image (and inside their own grain for equiaxed fields).
    pub spacings: Vec<f64>,
    /// Grain id per pixel (equiaxed): shapes only paint their own grain.
    pub clip: Option<Vec<u32>>,
    /// Trunks (columnar, drawn across the whole field) and primary arms
    /// (equiaxed): root x, root y, unit direction (x, y) and length, pixels.
    pub stems: Vec<[f64; 5]>,
}

/// How the section plane cuts the arms on one side of a trunk.
#[derive(Clone, Copy, Debug, PartialEq)]
enum Cut {
    /// Arm lies in the plane: a continuous (possibly wobbly) bar.
    Whole,
    /// Arm leaves and re-enters the plane: a row of rounded blobs.
    Blobs,
    /// Continuous near the root for the given fraction of its length, then blobs.
    Partial(f64),
}

struct Ctx {
    etched: bool,
    /// Chance that a coarsened arm is fused at its root to its neighbour.
    fuse_p: f64,
    sdas: f64,
    w: f64,
    h: f64,
}

impl Ctx {
    fn of(spec: &FieldSpec) -> Self {
        Self {
            // every style but `clean` draws the arms of an etched section
            etched: spec.style != Style::Clean,
            fuse_p: 0.2,
            sdas: spec.sdas_px,
            w: spec.width as f64,
            h: spec.height as f64,
        }
    }

    fn inside(&self, x: f64, y: f64) -> bool {
        x >= 0.0 && y >= 0.0 && x <= self.w - 1.0 && y <= self.h - 1.0
    }

    /// Whether a segment's bbox grown by `m` touches the image.
    fn visible(&self, x0: f64, y0: f64, x1: f64, y1: f64, m: f64) -> bool {
        x0.max(x1) >= -m
            && y0.max(y1) >= -m
            && x0.min(x1) <= self.w - 1.0 + m
            && y0.min(y1) <= self.h - 1.0 + m
    }
}

pub(crate) fn step<R: Rng + ?Sized>(rng: &mut R, sdas: f64, jitter: f64) -> f64 {
    let z: f64 = StandardNormal.sample(rng);
    sdas * (1.0 + jitter * z).clamp(0.4, 1.6)
}

fn wobble<R: Rng + ?Sized>(rng: &mut R, ctx: &Ctx, strength: f64) -> Wobble {
    if !ctx.etched {
        return Wobble::NONE;
    }
    let s = ctx.sdas;
    Wobble {
        w_amp: (rng.random_range(0.12..0.28) * strength) as f32,
        w_k1: (TAU / (s * rng.random_range(0.6..1.4))) as f32,
        w_p1: rng.random_range(0.0..TAU) as f32,
        w_k2: (TAU / (s * rng.random_range(0.3..0.7))) as f32,
        w_p2: rng.random_range(0.0..TAU) as f32,
        c_amp: (s * rng.random_range(0.02..0.08) * strength) as f32,
        c_k: (TAU / (s * rng.random_range(1.0..2.5))) as f32,
        c_p: rng.random_range(0.0..TAU) as f32,
    }
}

/// Slow width and centre-line undulation of a stem (trunk or primary arm).
fn stem_wobble<R: Rng + ?Sized>(rng: &mut R, ctx: &Ctx) -> Wobble {
    if !ctx.etched {
        return Wobble::NONE;
    }
    let s = ctx.sdas;
    Wobble {
        w_amp: rng.random_range(0.12..0.25) as f32,
        w_k1: (TAU / (s * rng.random_range(2.5..6.0))) as f32,
        w_p1: rng.random_range(0.0..TAU) as f32,
        w_k2: (TAU / (s * rng.random_range(0.8..1.6))) as f32,
        w_p2: rng.random_range(0.0..TAU) as f32,
        c_amp: (s * rng.random_range(0.08..0.22)) as f32,
        c_k: (TAU / (s * rng.random_range(5.0..14.0))) as f32,
        c_p: rng.random_range(0.0..TAU) as f32,
    }
}

fn pick_cut<R: Rng + ?Sized>(rng: &mut R, etched: bool) -> Cut {
    if !etched {
        return Cut::Whole;
    }
    let r: f64 = rng.random();
    if r < 0.45 {
        Cut::Whole
    } else if r < 0.75 {
        Cut::Blobs
    } else {
        Cut::Partial(rng.random_range(0.25..0.7))
    }
}

pub(crate) fn rotate(x: f64, y: f64, a: f64) -> (f64, f64) {
    let (s, c) = a.sin_cos();
    (x * c - y * s, x * s + y * c)
}

#[allow(clippy::too_many_arguments)]
pub(crate) fn capsule(
    ax: f64,
    ay: f64,
    dx: f64,
    dy: f64,
    len: f64,
    r0: f64,
    r1: f64,
    t0: f64,
    wob: Wobble,
) -> Shape {
    Shape::Arm {
        ax: ax as f32,
        ay: ay as f32,
        dx: dx as f32,
        dy: dy as f32,
        len: len as f32,
        r0: r0 as f32,
        r1: r1 as f32,
        t0: t0 as f32,
        wob,
    }
}

/// One secondary (or primary) arm starting at a root point.
struct Arm {
    x: f64,
    y: f64,
    dx: f64,
    dy: f64,
    len: f64,
    r0: f64,
    r1: f64,
    /// Distance from the root hidden under the parent stem (blobs start after it).
    skip: f64,
    cut: Cut,
    grain: u32,
}

fn emit_arm<R: Rng + ?Sized>(items: &mut Vec<Item>, rng: &mut R, ctx: &Ctx, a: &Arm) {
    let (cont_len, blob_from) = match a.cut {
        Cut::Whole => (a.len, a.len),
        Cut::Blobs => (0.0, a.skip.min(a.len)),
        Cut::Partial(f) => (
            a.len * f,
            a.len * f + ctx.sdas * rng.random_range(0.1..0.35),
        ),
    };
    if cont_len > 0.0 {
        let r_end = a.r0 + (a.r1 - a.r0) * (cont_len / a.len);
        let wob = wobble(rng, ctx, 1.0);
        items.push(Item::arm(
            capsule(a.x, a.y, a.dx, a.dy, cont_len, a.r0, r_end, 0.0, wob),
            a.grain,
        ));
    }
    let rest = a.len - blob_from;
    if rest <= 0.25 * ctx.sdas {
        return;
    }
    let nb = ((rest / (ctx.sdas * rng.random_range(1.1..2.0))).round() as usize).max(1);
    let seg = rest / nb as f64;
    for j in 0..nb {
        let t = blob_from + (j as f64 + 0.5 + rng.random_range(-0.12..0.12)) * seg;
        let frac = (t / a.len).clamp(0.0, 1.0);
        let r = a.r0 + (a.r1 - a.r0) * frac;
        let b = r * rng.random_range(1.0..1.45);
        let along = (0.5 * seg * rng.random_range(0.72..1.0)).max(0.8 * b);
        let (bdx, bdy) = rotate(a.dx, a.dy, rng.random_range(-0.25..0.25));
        items.push(Item::arm(
            Shape::Blob {
                cx: (a.x + a.dx * t) as f32,
                cy: (a.y + a.dy * t) as f32,
                dx: bdx as f32,
                dy: bdy as f32,
                a: along as f32,
                b: b as f32,
            },
            a.grain,
        ));
    }
}

/// Secondary arm radii (root, tip) for the style.
fn arm_radii<R: Rng + ?Sized>(rng: &mut R, ctx: &Ctx) -> (f64, f64) {
    if ctx.etched {
        // coarsening: some arms grew at the expense of thinner neighbours
        let c: f64 = rng.random();
        let coarsen = if c < 0.15 {
            rng.random_range(1.15..1.35)
        } else if c < 0.27 {
            rng.random_range(0.65..0.85)
        } else {
            1.0
        };
        let r0 = ctx.sdas * rng.random_range(0.23..0.33) * coarsen;
        (r0, r0 * rng.random_range(0.75..1.15))
    } else {
        let r0 = ctx.sdas * rng.random_range(0.225..0.3);
        (r0, r0 * rng.random_range(0.8..0.95))
    }
}

/// Arms on both sides of a stem running from `(bx, by)` along unit `(ux, uy)`
/// with arm roots at the stem coordinates `pos`. `len_of(t, rng)` gives the arm
/// length at stem coordinate `t`. Returns nothing; pushes shapes.
#[allow(clippy::too_many_arguments)]
fn arms_along<R: Rng + ?Sized>(
    items: &mut Vec<Item>,
    rng: &mut R,
    ctx: &Ctx,
    missing: f64,
    (bx, by): (f64, f64),
    (ux, uy): (f64, f64),
    stem_r: f64,
    pos: &[f64],
    cuts: [Cut; 2],
    grain: u32,
    len_of: &dyn Fn(f64, &mut R) -> f64,
    fit: &dyn Fn(f64, f64, f64, f64, f64, f64) -> f64,
) {
    let (nx, ny) = (-uy, ux);
    let wobble_rad = if ctx.etched { 8f64 } else { 4f64 }.to_radians();
    let mut prev: [Option<(f64, f64)>; 2] = [None, None];
    for &s in pos {
        let (rx, ry) = (bx + ux * s, by + uy * s);
        for (side, sg) in [(0usize, 1.0f64), (1usize, -1.0f64)] {
            let absent = rng.random::<f64>() < missing;
            let len = len_of(s, rng);
            let ang = rng.random_range(-1.0..1.0) * wobble_rad;
            let (dx, dy) = rotate(nx * sg, ny * sg, ang);
            let (r0, r1) = arm_radii(rng, ctx);
            let len = if absent {
                len
            } else {
                fit(rx, ry, dx, dy, len, r1)
            };
            if absent || len < 0.4 * ctx.sdas {
                prev[side] = None;
                continue;
            }
            let m = r0 * 3.0 + ctx.sdas;
            if !ctx.visible(rx, ry, rx + dx * len, ry + dy * len, m) {
                prev[side] = Some((rx, ry));
                continue;
            }
            emit_arm(
                items,
                rng,
                ctx,
                &Arm {
                    x: rx,
                    y: ry,
                    dx,
                    dy,
                    len,
                    r0,
                    r1,
                    skip: stem_r + 0.3 * ctx.sdas,
                    cut: cuts[side],
                    grain,
                },
            );
            // Coarsened neighbours fused at their roots: a web between them
            // just outside the stem.
            if ctx.etched && cuts[side] != Cut::Blobs {
                if let Some((px, py)) = prev[side] {
                    if rng.random_bool(ctx.fuse_p) {
                        let off = stem_r + ctx.sdas * rng.random_range(0.05..0.45);
                        let (ox, oy) = (nx * sg * off, ny * sg * off);
                        let (ddx, ddy) = (rx - px, ry - py);
                        let l = ddx.hypot(ddy);
                        if l > 1e-6 {
                            let r = ctx.sdas * rng.random_range(0.12..0.2);
                            items.push(Item::arm(
                                capsule(
                                    px + ox,
                                    py + oy,
                                    ddx / l,
                                    ddy / l,
                                    l,
                                    r,
                                    r,
                                    0.0,
                                    Wobble::NONE,
                                ),
                                grain,
                            ));
                        }
                    }
                }
            }
            prev[side] = Some((rx, ry));
        }
    }
}

/// Parallel trunks with combs of secondary arms.
pub(crate) fn columnar<R: Rng + ?Sized>(spec: &FieldSpec, rng: &mut R) -> Layout {
    let ctx = Ctx::of(spec);
    let sdas = spec.sdas_px;
    let p = spec.primary_spacing_px;
    let (cx, cy) = ((ctx.w - 1.0) / 2.0, (ctx.h - 1.0) / 2.0);
    let th = spec.primary_angle_deg.to_radians();
    let (ux, uy) = (th.cos(), -th.sin());
    let (nx, ny) = (-uy, ux);
    let r_ext = 0.5 * ctx.w.hypot(ctx.h) + p + 2.0 * sdas;

    let mut items = Vec::new();
    let mut spacings = Vec::new();
    let mut stems = Vec::new();
    let mut grain = 0u32;
    let mut left_in_grain: u32 = rng.random_range(2..=4);
    let mut off = -r_ext + rng.random::<f64>() * p;
    while off < r_ext {
        let (bx, by) = (cx + nx * off, cy + ny * off);
        let cuts = [pick_cut(rng, ctx.etched), pick_cut(rng, ctx.etched)];
        let rt = if ctx.etched {
            sdas * rng.random_range(0.32..0.46)
        } else {
            sdas * rng.random_range(0.175..0.3)
        };
        let both_cut = cuts[0] == Cut::Blobs && cuts[1] == Cut::Blobs;
        let trunk_visible = !both_cut || rng.random_bool(0.5);
        if trunk_visible {
            let wob = stem_wobble(rng, &ctx);
            let seg = (4.0 * sdas).max(48.0);
            let mut s = -r_ext;
            while s < r_ext {
                let (ax, ay) = (bx + ux * s, by + uy * s);
                if ctx.visible(ax, ay, ax + ux * seg, ay + uy * seg, 2.0 * rt + 2.0) {
                    items.push(Item::stem(
                        capsule(ax, ay, ux, uy, seg, rt, rt, s + r_ext, wob),
                        grain,
                    ));
                }
                s += seg;
            }
        }

        stems.push([bx - ux * r_ext, by - uy * r_ext, ux, uy, 2.0 * r_ext]);
        let mut pos = Vec::new();
        let mut s = -r_ext - rng.random::<f64>() * sdas;
        while s <= r_ext {
            pos.push(s);
            s += step(rng, sdas, spec.spacing_jitter);
        }
        for pair in pos.windows(2) {
            let a_in = ctx.inside(bx + ux * pair[0], by + uy * pair[0]);
            let b_in = ctx.inside(bx + ux * pair[1], by + uy * pair[1]);
            if a_in && b_in {
                spacings.push(pair[1] - pair[0]);
            }
        }
        let (lo, hi) = if ctx.etched { (0.38, 0.56) } else { (0.3, 0.5) };
        let len_of = move |_s: f64, r: &mut R| p * r.random_range(lo..hi);
        arms_along(
            &mut items,
            rng,
            &ctx,
            spec.missing_arm_fraction,
            (bx, by),
            (ux, uy),
            rt,
            &pos,
            cuts,
            grain,
            &len_of,
            &|_, _, _, _, len, _| len,
        );

        left_in_grain -= 1;
        if left_in_grain == 0 {
            grain += 1;
            left_in_grain = rng.random_range(2..=4);
        }
        off += p * if ctx.etched {
            rng.random_range(0.85..1.15)
        } else {
            rng.random_range(0.9..1.1)
        };
    }
    Layout {
        items,
        spacings,
        clip: None,
        stems,
    }
}

/// Four-armed crosses on a jittered grid, each clipped to its Voronoi cell.
pub(crate) fn equiaxed<R: Rng + ?Sized>(spec: &FieldSpec, rng: &mut R) -> Layout {
    let ctx = Ctx::of(spec);
    let sdas = spec.sdas_px;
    let g = spec.primary_spacing_px;
    let (w, h) = (spec.width as usize, spec.height as usize);
    let cols = (ctx.w / g).ceil() as usize + 2;
    let rows = (ctx.h / g).ceil() as usize + 2;
    let mut nuclei = Vec::with_capacity(cols * rows);
    for j in 0..rows {
        for i in 0..cols {
            let x = (i as f64 - 0.5 + rng.random_range(-0.4..0.4)) * g;
            let y = (j as f64 - 0.5 + rng.random_range(-0.4..0.4)) * g;
            nuclei.push((x, y));
        }
    }

    // Nearest nucleus (ties go to the lower id); the nucleus of cell (i, j)
    // is within 0.4 g of its cell centre, so a 5x5 search is exhaustive.
    let nearest = |xf: f64, yf: f64| -> u32 {
        let ci = (xf / g).floor() as i64 + 1;
        let cj = (yf / g).floor() as i64 + 1;
        let mut best = (f64::INFINITY, 0u32);
        for j in (cj - 2).max(0)..=(cj + 2).min(rows as i64 - 1) {
            for i in (ci - 2).max(0)..=(ci + 2).min(cols as i64 - 1) {
                let id = j as usize * cols + i as usize;
                let (nx, ny) = nuclei[id];
                let d = (nx - xf).powi(2) + (ny - yf).powi(2);
                if d < best.0 {
                    best = (d, id as u32);
                }
            }
        }
        best.1
    };
    // Grain map: shapes only paint pixels of their own grain.
    let mut clip = vec![0u32; w * h];
    clip.par_chunks_mut(w).enumerate().for_each(|(y, row)| {
        for (x, out) in row.iter_mut().enumerate() {
            *out = nearest(x as f64, y as f64);
        }
    });
    let in_grain = |x: f64, y: f64, id: u32| -> bool { ctx.inside(x, y) && nearest(x, y) == id };
    // Impingement: shorten an arm so its rounded tip stops short of the grain
    // boundary instead of being sliced by it.
    let fit_in = |id: u32, x: f64, y: f64, dx: f64, dy: f64, len: f64, r_tip: f64| -> f64 {
        let gap = 0.6 * r_tip;
        let reach = len + gap;
        let mut t = 0.0;
        while t <= reach {
            if nearest(x + dx * t, y + dy * t) != id {
                return (t - gap).max(0.0).min(len);
            }
            t += 1.0;
        }
        len
    };

    let mut items = Vec::new();
    let mut spacings = Vec::new();
    let mut stems = Vec::new();
    for (id, &(gx, gy)) in nuclei.iter().enumerate() {
        let id = id as u32;
        if !ctx.visible(gx, gy, gx, gy, 1.2 * g) {
            continue;
        }
        let phi = rng.random_range(0.0..FRAC_PI_2);
        if ctx.etched {
            let r = sdas * rng.random_range(0.45..0.65);
            items.push(Item::stem(
                Shape::Blob {
                    cx: gx as f32,
                    cy: gy as f32,
                    dx: 1.0,
                    dy: 0.0,
                    a: r as f32,
                    b: r as f32,
                },
                id,
            ));
        }
        for k in 0..4 {
            let (ux, uy) = (phi + k as f64 * FRAC_PI_2).sin_cos();
            let (ux, uy) = (uy, ux);
            let rp = if ctx.etched {
                sdas * rng.random_range(0.3..0.42)
            } else {
                sdas * rng.random_range(0.2..0.28)
            };
            let lp = fit_in(
                id,
                gx,
                gy,
                ux,
                uy,
                g * rng.random_range(0.6..0.9),
                rp * 0.65,
            );
            let wob = stem_wobble(rng, &ctx);
            items.push(Item::stem(
                capsule(gx, gy, ux, uy, lp, rp, rp * 0.65, 0.0, wob),
                id,
            ));
            stems.push([gx, gy, ux, uy, lp]);
            let cuts = [pick_cut(rng, ctx.etched), pick_cut(rng, ctx.etched)];
            let mut pos = Vec::new();
            let mut t = rp + sdas * rng.random_range(0.3..0.7);
            while t < lp - 0.25 * sdas {
                pos.push(t);
                t += step(rng, sdas, spec.spacing_jitter);
            }
            for pair in pos.windows(2) {
                if in_grain(gx + ux * pair[0], gy + uy * pair[0], id)
                    && in_grain(gx + ux * pair[1], gy + uy * pair[1], id)
                {
                    spacings.push(pair[1] - pair[0]);
                }
            }
            // Envelope: arms reach towards the quadrant diagonal (where the
            // neighbouring primary arm's secondaries come from) and, in the
            // clean style, shorten towards the primary tip.
            let etched = ctx.etched;
            let len_of = move |t: f64, r: &mut R| {
                if etched {
                    // packed grains: arms grow until they impinge (the grain
                    // boundary trims them in `fit_in`)
                    let diag = t * r.random_range(0.8..0.97);
                    let tip = (lp - t) * r.random_range(2.0..4.0) + 1.5 * sdas;
                    diag.min(tip).min(0.9 * g)
                } else {
                    let diag = t * r.random_range(0.6..0.92);
                    let tip = (lp - t) * r.random_range(1.0..1.5) + 0.6 * sdas;
                    diag.min(tip).min(0.55 * g)
                }
            };
            arms_along(
                &mut items,
                rng,
                &ctx,
                spec.missing_arm_fraction,
                (gx, gy),
                (ux, uy),
                rp,
                &pos,
                cuts,
                id,
                &len_of,
                &|x, y, dx, dy, len, r| fit_in(id, x, y, dx, dy, len, r),
            );
        }
    }
    Layout {
        items,
        spacings,
        clip: Some(clip),
        stems,
    }
}

/// Packed equiaxed rosettes whose grains touch (style `dense`).
///
/// Physical picture: in a casting with many nuclei the equiaxed grains grow
/// until they meet, so the arms run up to the grain boundaries and the
/// field has no free liquid left between grains. A section through such a
/// grain cuts its primary arms at any angle, so a grain shows four to six
/// primary arms (four for a section near a cube plane, six near an
/// octahedral one, at uneven angles in between). The longer the field took
/// to freeze, the more arms coarsened (thin ones dissolved into thick ones)
/// and fused at their roots, which is why the root webs are twice as
/// frequent as in `etched` fields.
pub(crate) fn dense<R: Rng + ?Sized>(spec: &FieldSpec, rng: &mut R) -> Layout {
    let mut ctx = Ctx::of(spec);
    ctx.fuse_p = 0.45;
    let sdas = spec.sdas_px;
    // grain size: the spec's primary spacing, shrunk so that grains pack
    let g = spec.primary_spacing_px * rng.random_range(0.75..0.95);
    let (w, h) = (spec.width as usize, spec.height as usize);
    let cols = (ctx.w / g).ceil() as usize + 2;
    let rows = (ctx.h / g).ceil() as usize + 2;
    let mut nuclei = Vec::with_capacity(cols * rows);
    for j in 0..rows {
        for i in 0..cols {
            let x = (i as f64 - 0.5 + rng.random_range(-0.4..0.4)) * g;
            let y = (j as f64 - 0.5 + rng.random_range(-0.4..0.4)) * g;
            nuclei.push((x, y));
        }
    }
    // nucleus within 0.4 g of its cell centre: a 5x5 search is exhaustive
    let nearest = |xf: f64, yf: f64| -> u32 {
        let ci = (xf / g).floor() as i64 + 1;
        let cj = (yf / g).floor() as i64 + 1;
        let mut best = (f64::INFINITY, 0u32);
        for j in (cj - 2).max(0)..=(cj + 2).min(rows as i64 - 1) {
            for i in (ci - 2).max(0)..=(ci + 2).min(cols as i64 - 1) {
                let id = j as usize * cols + i as usize;
                let (nx, ny) = nuclei[id];
                let d = (nx - xf).powi(2) + (ny - yf).powi(2);
                if d < best.0 {
                    best = (d, id as u32);
                }
            }
        }
        best.1
    };
    let mut clip = vec![0u32; w * h];
    clip.par_chunks_mut(w).enumerate().for_each(|(y, row)| {
        for (x, out) in row.iter_mut().enumerate() {
            *out = nearest(x as f64, y as f64);
        }
    });
    let in_grain = |x: f64, y: f64, id: u32| -> bool { ctx.inside(x, y) && nearest(x, y) == id };
    // arms grow until they impinge: the tip stops a fraction of its radius
    // short of the boundary (the last liquid lies there)
    let fit_in = |id: u32, x: f64, y: f64, dx: f64, dy: f64, len: f64, r_tip: f64| -> f64 {
        let gap = 0.4 * r_tip;
        let reach = len + gap;
        let mut t = 0.0;
        while t <= reach {
            if nearest(x + dx * t, y + dy * t) != id {
                return (t - gap).max(0.0).min(len);
            }
            t += 1.0;
        }
        len
    };

    let mut items = Vec::new();
    let mut spacings = Vec::new();
    let mut stems = Vec::new();
    for (id, &(gx, gy)) in nuclei.iter().enumerate() {
        let id = id as u32;
        if !ctx.visible(gx, gy, gx, gy, 1.2 * g) {
            continue;
        }
        let n_arms = [4usize, 4, 5, 6][rng.random_range(0..4)];
        let phi = rng.random_range(0.0..TAU);
        let r = sdas * rng.random_range(0.55..0.8);
        items.push(Item::stem(
            Shape::Blob {
                cx: gx as f32,
                cy: gy as f32,
                dx: 1.0,
                dy: 0.0,
                a: r as f32,
                b: r as f32,
            },
            id,
        ));
        for k in 0..n_arms {
            let a = phi + TAU * k as f64 / n_arms as f64 + rng.random_range(-0.15..0.15);
            let (ux, uy) = (a.cos(), a.sin());
            let rp = sdas * rng.random_range(0.32..0.45);
            let lp = fit_in(id, gx, gy, ux, uy, g * rng.random_range(0.8..1.2), rp * 0.7);
            if lp < 1.5 * sdas {
                continue;
            }
            let wob = stem_wobble(rng, &ctx);
            items.push(Item::stem(
                capsule(gx, gy, ux, uy, lp, rp, rp * 0.7, 0.0, wob),
                id,
            ));
            stems.push([gx, gy, ux, uy, lp]);
            let cuts = [pick_cut(rng, true), pick_cut(rng, true)];
            let mut pos = Vec::new();
            let mut t = rp + sdas * rng.random_range(0.3..0.7);
            while t < lp - 0.25 * sdas {
                pos.push(t);
                t += step(rng, sdas, spec.spacing_jitter);
            }
            for pair in pos.windows(2) {
                if in_grain(gx + ux * pair[0], gy + uy * pair[0], id)
                    && in_grain(gx + ux * pair[1], gy + uy * pair[1], id)
                {
                    spacings.push(pair[1] - pair[0]);
                }
            }
            // Arms reach half-way to the neighbouring primary arm (the angle
            // between primaries is 60-90 degrees, so at stem coordinate t the
            // gap to the neighbour's arms is about t) and near the tip stay
            // short (they started growing later).
            let half_gap = (std::f64::consts::PI / n_arms as f64).tan();
            let len_of = move |t: f64, r: &mut R| {
                let side = t * half_gap * r.random_range(0.85..1.05);
                let tip = (lp - t) * r.random_range(2.0..4.0) + 1.5 * sdas;
                side.min(tip).min(0.9 * g)
            };
            arms_along(
                &mut items,
                rng,
                &ctx,
                spec.missing_arm_fraction,
                (gx, gy),
                (ux, uy),
                rp,
                &pos,
                cuts,
                id,
                &len_of,
                &|x, y, dx, dy, len, r| fit_in(id, x, y, dx, dy, len, r),
            );
        }
    }
    Layout {
        items,
        spacings,
        clip: Some(clip),
        stems,
    }
}
