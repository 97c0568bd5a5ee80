//! A map of the local SDAS over the image (`measure --map`): a grid of
//! square cells, each cell's value read from the local measurements within
//! a radius of its centre by the rules of a point ([`super::at`] with the
//! radius given: each method's own statistics, two methods that agree, one
//! population around the centre). A cell without that support has no
//! value, with the reason.

use super::{at, AtSpec, Index, LengthUnit};
use crate::methods::{Method, Outcome};
use crate::stats;
use crate::units::{Micrometres, Pixels, UmPerPx};

/// The neighbourhood of a map cell, in local arm spacings: a disc of 10
/// spacings' radius. A local value needs about a dozen local measurements
/// of each of two methods, each spanning a few spacings; a field covered
/// with them holds that many within about 10 spacings of a point (the
/// reasoning of [`super::MAX_RADIUS_SPACINGS`], which allows twice that
/// for a point so that half the neighbourhood may lack measurements). A
/// map cannot resolve the spacing finer than the neighbourhood its values
/// need, so the cells are as wide as the radius: each cell's disc covers
/// the whole cell (half its diagonal is 0.71 of the radius), and the
/// discs of neighbouring cells overlap only at their rims.
pub const MAP_RADIUS_SPACINGS: f64 = 10.0;

/// Most cells along the longer side of an image: 100. Cells narrower than
/// a hundredth of the picture (under 10 px of a picture 1000 px wide) no
/// longer read as cells, and the number of neighbourhoods read stays
/// bounded on a very large image of fine structure; the cells then grow
/// (and their neighbourhoods with them).
pub const MAX_CELLS_PER_SIDE: f64 = 100.0;

/// One cell of the map.
#[derive(Clone, Debug, PartialEq)]
pub struct Cell {
    /// The cell's centre, um from the top-left corner.
    pub x_um: f64,
    pub y_um: f64,
    pub value: Option<Micrometres>,
    pub ci95: Option<[Micrometres; 2]>,
    /// Independent local measurements behind the value.
    pub n_eff: f64,
    pub methods: Vec<Method>,
    /// Why there is no value, when there is none.
    pub reason: Option<String>,
}

/// The local SDAS over the image.
#[derive(Clone, Debug, PartialEq)]
pub struct Map {
    /// The top-left corner of the first cell, um (the image's corner).
    pub origin_um: [f64; 2],
    /// The cells' side, um.
    pub step_um: f64,
    /// The radius of each cell's neighbourhood, um.
    pub radius_um: f64,
    /// The local spacing the radius was set from (the median of the local
    /// measurements that may enter a local value), um.
    pub spacing_um: f64,
    pub columns: usize,
    pub rows: usize,
    /// Row by row from the top, each row from the left.
    pub cells: Vec<Cell>,
    /// Why there is no map, when there is none.
    pub reason: Option<String>,
}

impl Map {
    /// The index (in `cells`) of the cell holding the point (um), when it
    /// lies on the map.
    pub fn cell_index(&self, x_um: f64, y_um: f64) -> Option<usize> {
        if self.cells.is_empty()
            || self.step_um.partial_cmp(&0.0) != Some(std::cmp::Ordering::Greater)
        {
            return None;
        }
        let c = ((x_um - self.origin_um[0]) / self.step_um).floor();
        let r = ((y_um - self.origin_um[1]) / self.step_um).floor();
        if c.is_nan() || r.is_nan() || c < 0.0 || r < 0.0 {
            return None;
        }
        // A point on the image's far edge belongs to the last cell.
        let (c, r) = (
            (c as usize).min(self.columns - 1),
            (r as usize).min(self.rows - 1),
        );
        Some(r * self.columns + c)
    }

    /// The cell holding the point (um), when it lies on the map.
    pub fn cell_at(&self, x_um: f64, y_um: f64) -> Option<&Cell> {
        self.cells.get(self.cell_index(x_um, y_um)?)
    }

    /// Cells with a value.
    pub fn valued(&self) -> usize {
        self.cells.iter().filter(|c| c.value.is_some()).count()
    }
}

/// The map of an image of `width` x `height` pixels from its index and
/// the methods' outcomes on it (see the module notes).
pub fn map(
    index: &Index,
    outcomes: &[Outcome],
    cal: UmPerPx,
    cal_rel_u: Option<f64>,
    (width, height): (u32, u32),
    fft_min_quality: f64,
) -> Map {
    let (w, h) = (
        cal.to_um(Pixels(width as f64)).0,
        cal.to_um(Pixels(height as f64)).0,
    );
    let fft_valued = outcomes
        .iter()
        .any(|o| o.method == Method::Fft && o.value.is_some());
    let spacings: Vec<f64> = index
        .entries()
        .iter()
        .filter(|e| super::counts(e, fft_valued, fft_min_quality))
        .map(|e| cal.to_um(e.local.spacing).0)
        .filter(|v| v.is_finite() && *v > 0.0)
        .collect();
    let mut m = Map {
        origin_um: [0.0, 0.0],
        step_um: 0.0,
        radius_um: 0.0,
        spacing_um: 0.0,
        columns: 0,
        rows: 0,
        cells: vec![],
        reason: None,
    };
    let Some(spacing) = stats::median(&spacings) else {
        m.reason = Some(
            "no local measurement may enter a local value (no method has a value on the image, or none kept local measurements)".into(),
        );
        return m;
    };
    let step = (MAP_RADIUS_SPACINGS * spacing).max(w.max(h) / MAX_CELLS_PER_SIDE);
    m.spacing_um = spacing;
    m.step_um = step;
    m.radius_um = step;
    m.columns = ((w / step).ceil() as usize).max(1);
    m.rows = ((h / step).ceil() as usize).max(1);
    for r in 0..m.rows {
        for c in 0..m.columns {
            // The centre of the cell, kept inside the image (the last
            // row and column may be cut by its edge).
            let x = ((c as f64 + 0.5) * step).min(w);
            let y = ((r as f64 + 0.5) * step).min(h);
            let spec = AtSpec {
                text: format!("{x:.3},{y:.3}:{step:.3}"),
                x,
                y,
                radius: Some(step),
                unit: LengthUnit::Micrometres,
            };
            let a = at(
                index,
                &spec,
                outcomes,
                cal,
                cal_rel_u,
                (width, height),
                fft_min_quality,
            );
            m.cells.push(Cell {
                x_um: x,
                y_um: y,
                value: a.estimate.value,
                ci95: a.estimate.ci95,
                n_eff: a.estimate.n_eff,
                methods: a.estimate.methods.clone(),
                reason: a.estimate.reason.clone(),
            });
        }
    }
    m
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::methods::Local;

    #[test]
    fn a_point_finds_its_cell_and_the_far_edge_the_last_one() {
        let cell = |x: f64, y: f64| Cell {
            x_um: x,
            y_um: y,
            value: None,
            ci95: None,
            n_eff: 0.0,
            methods: vec![],
            reason: None,
        };
        let m = Map {
            origin_um: [0.0, 0.0],
            step_um: 10.0,
            radius_um: 10.0,
            spacing_um: 1.0,
            columns: 3,
            rows: 2,
            cells: vec![
                cell(5.0, 5.0),
                cell(15.0, 5.0),
                cell(25.0, 5.0),
                cell(5.0, 15.0),
                cell(15.0, 15.0),
                cell(25.0, 15.0),
            ],
            reason: None,
        };
        assert_eq!(m.cell_at(12.0, 3.0).map(|c| c.x_um), Some(15.0));
        assert_eq!(
            m.cell_at(30.0, 20.0).map(|c| (c.x_um, c.y_um)),
            Some((25.0, 15.0))
        );
        assert!(m.cell_at(-1.0, 3.0).is_none());
    }

    #[test]
    fn without_local_measurements_there_is_no_map_and_the_reason() {
        let cal = UmPerPx::new(1.0).unwrap();
        let index = Index::of_entries(vec![]);
        let m = map(&index, &[], cal, None, (100, 100), 6.0);
        assert!(m.cells.is_empty() && m.reason.is_some());
        // Entries of a method without a value on the image do not count.
        let e = super::super::Entry {
            method: Method::Intercept,
            x_um: 10.0,
            y_um: 10.0,
            local: Local {
                x: Pixels(10.0),
                y: Pixels(10.0),
                spacing: Pixels(5.0),
                dir_deg: 0.0,
                quality: None,
                used: false,
            },
        };
        let m = map(&Index::of_entries(vec![e]), &[], cal, None, (100, 100), 6.0);
        assert!(m.cells.is_empty() && m.reason.is_some());
    }
}
