//! Frame and item distances of the ABX task.
//!
//! Frame distance: the angle between two frames as a share of π,
//! `arccos(clamp(cos, -1, 1)) / π`; a zero frame is at distance 1/2 from every frame.
//!
//! Item distance: dynamic time warping over the frame distances with the steps (1,1), (1,0)
//! and (0,1): `D[i][j] = c[i][j] + min(D[i-1][j-1], D[i-1][j], D[i][j-1])`, exact ties going
//! to the diagonal, then to (i-1, j), then to (i, j-1); the distance is the final cumulative
//! cost divided by the number of cells on the chosen path.

use ndarray::{ArrayView2, Axis};

/// Angular distance of two unit vectors with cosine similarity `cos`, in [0, 1].
pub fn angular(cos: f32) -> f64 {
    (cos as f64).clamp(-1.0, 1.0).acos() / std::f64::consts::PI
}

/// Dynamic time warping of a cost matrix (rows × columns, both at least 1).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Dtw {
    /// Final cumulative cost `D[rows-1][cols-1]`.
    pub cost: f64,
    /// Cells on the path chosen with ties going diagonal, then (i-1, j), then (i, j-1): the
    /// path of the item whose frames are the rows, against the item of the columns.
    pub cells_rows_first: u32,
    /// Cells on the path chosen with ties going diagonal, then (i, j-1), then (i-1, j): the
    /// same rule with the roles of the items swapped (the DTW of the transposed matrix).
    pub cells_cols_first: u32,
}

impl Dtw {
    /// Distance of the row item to the column item.
    pub fn distance(&self) -> f64 {
        self.cost / self.cells_rows_first as f64
    }
    /// Distance of the column item to the row item (the DTW of the transposed cost matrix:
    /// same cumulative cost, possibly another path on exact ties).
    pub fn distance_transposed(&self) -> f64 {
        self.cost / self.cells_cols_first as f64
    }
}

/// Which predecessor wins: 0 diagonal, 1 (i-1, j), 2 (i, j-1); ties in that order when
/// `up_first`, else diagonal, (i, j-1), (i-1, j).
#[inline]
fn pick(diag: f64, up: f64, left: f64, up_first: bool) -> u8 {
    let m = diag.min(up).min(left);
    if diag == m {
        0
    } else if up_first {
        if up == m {
            1
        } else {
            2
        }
    } else if left == m {
        2
    } else {
        1
    }
}

/// DTW of `cost` (see the module text). Panics on an empty matrix.
pub fn dtw(cost: ArrayView2<f64>) -> Dtw {
    let (m, n) = cost.dim();
    assert!(m > 0 && n > 0, "DTW of an empty item");
    // rolling rows of the cumulative cost and of both path lengths
    let mut prev_d = vec![0f64; n];
    let mut prev_a = vec![0u32; n];
    let mut prev_b = vec![0u32; n];
    let mut cur_d = vec![0f64; n];
    let mut cur_a = vec![0u32; n];
    let mut cur_b = vec![0u32; n];
    for (i, row) in cost.axis_iter(Axis(0)).enumerate() {
        for j in 0..n {
            let c = row[j];
            let (d, a, b) = match (i, j) {
                (0, 0) => (c, 1, 1),
                (0, _) => (c + cur_d[j - 1], cur_a[j - 1] + 1, cur_b[j - 1] + 1),
                (_, 0) => (c + prev_d[0], prev_a[0] + 1, prev_b[0] + 1),
                _ => {
                    let (dg, up, lf) = (prev_d[j - 1], prev_d[j], cur_d[j - 1]);
                    let a = match pick(dg, up, lf, true) {
                        0 => prev_a[j - 1],
                        1 => prev_a[j],
                        _ => cur_a[j - 1],
                    };
                    let b = match pick(dg, up, lf, false) {
                        0 => prev_b[j - 1],
                        1 => prev_b[j],
                        _ => cur_b[j - 1],
                    };
                    (c + dg.min(up).min(lf), a + 1, b + 1)
                }
            };
            cur_d[j] = d;
            cur_a[j] = a;
            cur_b[j] = b;
        }
        std::mem::swap(&mut prev_d, &mut cur_d);
        std::mem::swap(&mut prev_a, &mut cur_a);
        std::mem::swap(&mut prev_b, &mut cur_b);
    }
    Dtw {
        cost: prev_d[n - 1],
        cells_rows_first: prev_a[n - 1],
        cells_cols_first: prev_b[n - 1],
    }
}

/// Frame-distance matrix of two items whose frames are unit vectors (rows), with `zero_*`
/// flagging zero frames (distance 1/2 to everything): one matrix product.
pub fn frame_costs(
    p: ArrayView2<f32>,
    zero_p: &[bool],
    q: ArrayView2<f32>,
    zero_q: &[bool],
) -> ndarray::Array2<f64> {
    let cos = p.dot(&q.t());
    let mut out = cos.mapv(angular);
    if zero_p.iter().any(|&z| z) || zero_q.iter().any(|&z| z) {
        for ((i, j), v) in out.indexed_iter_mut() {
            if zero_p[i] || zero_q[j] {
                *v = 0.5;
            }
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::{array, Array2};

    #[test]
    fn dtw_hand_worked_3x3() {
        // Cost matrix c (rows: item P's frames, columns: item Q's frames):
        //     [1 3 3]
        //     [1 3 3]
        //     [0 1 1]
        // Cumulative D (ties: diagonal, then up (i-1,j), then left (i,j-1)) and path cells L:
        //   row 0: D = 1, 4, 7                       L = 1, 2, 3
        //   col 0: D[1][0] = 1+1 = 2 (L 2), D[2][0] = 2+0 = 2 (L 3)
        //   D[1][1] = 3 + min(diag 1, up 4, left 2) = 4, diagonal, L = 2
        //   D[1][2] = 3 + min(diag 4, up 7, left 4) = 7, diag/left tie -> diagonal, L = 3
        //   D[2][1] = 1 + min(diag 2, up 4, left 2) = 3, diag/left tie -> diagonal, L = 3
        //   D[2][2] = 1 + min(diag 4, up 7, left 3) = 4, left, L = L[2][1] + 1 = 4
        // Path (0,0) (1,0) (2,1) (2,2): cost 1+1+1+1 = 4 over 4 cells -> distance 1.
        // (Had the tie at (2,1) gone left, the path would have 5 cells and distance 0.8.)
        let c: Array2<f64> = array![[1., 3., 3.], [1., 3., 3.], [0., 1., 1.]];
        let r = dtw(c.view());
        assert_eq!(r.cost, 4.0);
        assert_eq!(r.cells_rows_first, 4);
        assert_eq!(r.distance(), 1.0);
        // transposed: the same cumulative cost; the ties are diagonal ones, so same path
        let t = dtw(c.t());
        assert_eq!(t.cost, 4.0);
        assert_eq!(t.cells_rows_first, 4);
    }

    #[test]
    fn dtw_rectangular_and_single_cells() {
        // 1 x 3: the only path runs along the row: (2 + 4 + 0) / 3
        let r = dtw(array![[2.0, 4.0, 0.0]].view());
        assert_eq!((r.cost, r.cells_rows_first), (6.0, 3));
        assert_eq!(r.distance(), 2.0);
        let one = dtw(array![[0.25]].view());
        assert_eq!(one.distance(), 0.25);
    }

    #[test]
    fn up_and_left_ties_break_by_role() {
        // Random small matrices of costs 0, 1, 2 (many exact ties): the second path length of
        // c must be the first path length of c transposed, and the other way round.
        let mut seed = 7u64;
        for _ in 0..500 {
            let mut next = || {
                seed = seed
                    .wrapping_mul(6364136223846793005)
                    .wrapping_add(1442695040888963407);
                (seed >> 33) as usize
            };
            let (m, n) = (1 + next() % 5, 1 + next() % 5);
            let c = Array2::from_shape_fn((m, n), |_| (next() % 3) as f64);
            let a = dtw(c.view());
            let b = dtw(c.t());
            assert_eq!(a.cost, b.cost);
            assert_eq!(a.cells_cols_first, b.cells_rows_first, "{c:?}");
            assert_eq!(a.cells_rows_first, b.cells_cols_first, "{c:?}");
        }
    }

    #[test]
    fn angular_distance_and_zero_frames() {
        assert_eq!(angular(1.0), 0.0);
        assert!((angular(0.0) - 0.5).abs() < 1e-15);
        assert_eq!(angular(-1.0), 1.0);
        assert_eq!(angular(1.0000001), 0.0); // clamped
        let p = array![[1.0f32, 0.0], [0.0, 0.0]];
        let q = array![[0.0f32, 1.0], [1.0, 0.0], [-1.0, 0.0]];
        let c = frame_costs(p.view(), &[false, true], q.view(), &[false, false, false]);
        assert!((c[[0, 0]] - 0.5).abs() < 1e-12);
        assert_eq!(c[[0, 1]], 0.0);
        assert_eq!(c[[0, 2]], 1.0);
        assert_eq!(c.row(1).to_vec(), vec![0.5, 0.5, 0.5]);
    }
}
