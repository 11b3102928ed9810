//! A multilayer perceptron with ReLU hidden layers and a softmax output, trained by
//! backpropagation (Rumelhart, Hinton & Williams 1986) on minibatches with Adam (Kingma &
//! Ba 2015) against cross-entropy. He initialisation (He et al. 2015) for the first and
//! output layers, identity initialisation (Le, Jaitly & Hinton 2015) between hidden layers. Every product is a
//! single-threaded ndarray GEMM or the blocked `linalg::matmul`, so the trained weights do
//! not depend on the thread count.

use ndarray::{Array1, Array2, ArrayView2, Axis, Zip};
use rand_chacha::ChaCha8Rng;

use super::synth::normal;

/// Adam's step size and moment decay rates (Kingma & Ba 2015, their defaults for β).
#[derive(Clone, Copy, Debug)]
pub struct Adam {
    /// Step size.
    pub lr: f32,
    /// First-moment decay.
    pub beta1: f32,
    /// Second-moment decay.
    pub beta2: f32,
    /// Denominator guard.
    pub eps: f32,
    /// Layer-wise step decay: weight matrix `l` of `L` steps by `lr · layer_decay^(L − 1 − l)`
    /// (1: the same step everywhere).
    pub layer_decay: f32,
}

impl Default for Adam {
    fn default() -> Self {
        Adam {
            lr: 1e-3,
            beta1: 0.9,
            beta2: 0.999,
            eps: 1e-8,
            layer_decay: 1.0,
        }
    }
}

/// Standard deviation of the noise added to identity-initialised hidden layers.
const IDENTITY_NOISE: f64 = 0.02;

/// Weights, biases and optimiser state.
pub struct Mlp {
    /// Weight matrices, fan-in × fan-out.
    pub w: Vec<Array2<f32>>,
    /// Bias vectors.
    pub b: Vec<Array1<f32>>,
    mw: Vec<Array2<f32>>,
    vw: Vec<Array2<f32>>,
    mb: Vec<Array1<f32>>,
    vb: Vec<Array1<f32>>,
    t: i32,
}

impl Mlp {
    /// A network with layer sizes `sizes` (input, hidden..., output): He initialisation for
    /// the first and last layers, identity plus noise between hidden layers of equal width.
    pub fn new(sizes: &[usize], rng: &mut ChaCha8Rng) -> Mlp {
        let mut w = Vec::new();
        let mut b = Vec::new();
        for (l, pair) in sizes.windows(2).enumerate() {
            let square_hidden = l > 0 && l + 2 < sizes.len() && pair[0] == pair[1];
            if square_hidden {
                // Identity plus small noise (Le, Jaitly & Hinton 2015): post-ReLU inputs are
                // non-negative, so an untrained layer passes its input on nearly unchanged and
                // what the upper layers discard is learnt, not lost to random projections.
                w.push(Array2::from_shape_fn((pair[0], pair[1]), |(i, j)| {
                    (if i == j { 1.0 } else { 0.0 } + IDENTITY_NOISE * normal(rng)) as f32
                }));
                b.push(Array1::zeros(pair[1]));
                continue;
            }
            let sd = (2.0 / pair[0] as f64).sqrt();
            w.push(Array2::from_shape_fn((pair[0], pair[1]), |_| {
                (sd * normal(rng)) as f32
            }));
            // A small positive bias keeps ReLU units alive at the start (common practice).
            b.push(Array1::from_elem(pair[1], 0.01f32));
        }
        let mw = w.iter().map(|a| Array2::zeros(a.raw_dim())).collect();
        let vw = w.iter().map(|a| Array2::zeros(a.raw_dim())).collect();
        let mb = b.iter().map(|a| Array1::zeros(a.raw_dim())).collect();
        let vb = b.iter().map(|a| Array1::zeros(a.raw_dim())).collect();
        Mlp {
            w,
            b,
            mw,
            vw,
            mb,
            vb,
            t: 0,
        }
    }

    /// Number of hidden layers.
    pub fn n_hidden(&self) -> usize {
        self.w.len() - 1
    }

    /// Hidden activations (post-ReLU) of every hidden layer and the output logits.
    /// Uses the blocked parallel product: for whole data sets.
    pub fn forward_all(&self, x: &ArrayView2<f32>) -> Vec<Array2<f32>> {
        self.forward_with(x, crate::analysis::linalg::matmul)
    }

    fn forward_with(
        &self,
        x: &ArrayView2<f32>,
        mm: impl Fn(&ArrayView2<f32>, &ArrayView2<f32>) -> Array2<f32>,
    ) -> Vec<Array2<f32>> {
        let mut outs: Vec<Array2<f32>> = Vec::with_capacity(self.w.len());
        for l in 0..self.w.len() {
            let input = if l == 0 { x.view() } else { outs[l - 1].view() };
            let mut z = mm(&input, &self.w[l].view());
            z += &self.b[l];
            if l + 1 < self.w.len() {
                z.mapv_inplace(|v| v.max(0.0));
            }
            outs.push(z);
        }
        outs
    }

    /// Predicted class per row.
    pub fn predict(&self, x: &ArrayView2<f32>) -> Vec<usize> {
        let outs = self.forward_all(x);
        let logits = outs.last().expect("network has an output layer");
        logits
            .outer_iter()
            .map(|r| (0..r.len()).fold(0, |best, j| if r[j] > r[best] { j } else { best }))
            .collect()
    }

    /// Mean cross-entropy of a minibatch and its gradients for every weight and bias.
    pub fn gradients(
        &self,
        x: &ArrayView2<f32>,
        y: &[usize],
    ) -> (f32, Vec<Array2<f32>>, Vec<Array1<f32>>) {
        let n = x.nrows();
        let outs = self.forward_with(x, |a, w| a.dot(w));
        let logits = outs.last().expect("network has an output layer");
        let mut delta = logits.clone();
        let mut loss = 0f64;
        for (mut row, &c) in delta.outer_iter_mut().zip(y) {
            let m = row.fold(f32::NEG_INFINITY, |a, &v| a.max(v));
            row.mapv_inplace(|v| (v - m).exp());
            let s = row.sum();
            row /= s;
            loss -= (row[c].max(1e-30) as f64).ln();
            row[c] -= 1.0;
        }
        delta /= n as f32;
        let mut gws = vec![Array2::zeros((0, 0)); self.w.len()];
        let mut gbs = vec![Array1::zeros(0); self.w.len()];
        for l in (0..self.w.len()).rev() {
            let input = if l == 0 { x.view() } else { outs[l - 1].view() };
            gws[l] = input.t().dot(&delta);
            gbs[l] = delta.sum_axis(Axis(0));
            if l > 0 {
                let mut prev = delta.dot(&self.w[l].t());
                Zip::from(&mut prev).and(&outs[l - 1]).for_each(|d, &a| {
                    if a <= 0.0 {
                        *d = 0.0;
                    }
                });
                delta = prev;
            }
        }
        ((loss / n as f64) as f32, gws, gbs)
    }

    /// One Adam step on a minibatch; returns the mean cross-entropy before the step.
    pub fn train_step(&mut self, x: &ArrayView2<f32>, y: &[usize], opt: &Adam) -> f32 {
        let (loss, gws, gbs) = self.gradients(x, y);
        self.t += 1;
        let bc1 = 1.0 - opt.beta1.powi(self.t);
        let bc2 = 1.0 - opt.beta2.powi(self.t);
        let n_layers = self.w.len();
        for l in 0..n_layers {
            let lr = opt.lr * opt.layer_decay.powi((n_layers - 1 - l) as i32);
            let step = |p: &mut f32, m: &mut f32, v: &mut f32, g: f32| {
                *m = opt.beta1 * *m + (1.0 - opt.beta1) * g;
                *v = opt.beta2 * *v + (1.0 - opt.beta2) * g * g;
                *p -= lr * (*m / bc1) / ((*v / bc2).sqrt() + opt.eps);
            };
            Zip::from(&mut self.w[l])
                .and(&mut self.mw[l])
                .and(&mut self.vw[l])
                .and(&gws[l])
                .for_each(|p, m, v, &g| step(p, m, v, g));
            Zip::from(&mut self.b[l])
                .and(&mut self.mb[l])
                .and(&mut self.vb[l])
                .and(&gbs[l])
                .for_each(|p, m, v, &g| step(p, m, v, g));
        }
        loss
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;

    #[test]
    fn backprop_gradient_matches_finite_differences() {
        // Central differences of the cross-entropy, step 2e-3 in f32 (common practice for
        // checking backpropagation); relative error under 2 % on every checked weight.
        let mut rng = ChaCha8Rng::seed_from_u64(3);
        let x = Array2::from_shape_fn((16, 5), |_| normal(&mut rng) as f32);
        let y: Vec<usize> = (0..16).map(|i| (i * 7) % 3).collect();
        let mut net = Mlp::new(&[5, 7, 6, 3], &mut rng);
        let (_, gws, gbs) = net.gradients(&x.view(), &y);
        let h = 2e-3f32;
        let mut checked = 0;
        for l in 0..3 {
            for (i, j) in [(0, 0), (1, 2), (4, 1)] {
                if i >= net.w[l].nrows() || j >= net.w[l].ncols() {
                    continue;
                }
                let orig = net.w[l][[i, j]];
                net.w[l][[i, j]] = orig + h;
                let up = net.gradients(&x.view(), &y).0;
                net.w[l][[i, j]] = orig - h;
                let down = net.gradients(&x.view(), &y).0;
                net.w[l][[i, j]] = orig;
                let fd = (up - down) / (2.0 * h);
                let g = gws[l][[i, j]];
                assert!(
                    (fd - g).abs() <= 0.02 * g.abs().max(fd.abs()) + 1e-4,
                    "layer {l} w[{i},{j}]: backprop {g}, finite difference {fd}"
                );
                checked += 1;
            }
            let orig = net.b[l][0];
            net.b[l][0] = orig + h;
            let up = net.gradients(&x.view(), &y).0;
            net.b[l][0] = orig - h;
            let down = net.gradients(&x.view(), &y).0;
            net.b[l][0] = orig;
            let fd = (up - down) / (2.0 * h);
            assert!(
                (fd - gbs[l][0]).abs() <= 0.02 * fd.abs().max(gbs[l][0].abs()) + 1e-4,
                "layer {l} b[0]: backprop {}, finite difference {fd}",
                gbs[l][0]
            );
            checked += 1;
        }
        assert!(checked >= 9);
    }

    #[test]
    fn learns_a_linearly_separable_problem() {
        let mut rng = ChaCha8Rng::seed_from_u64(1);
        let x = Array2::from_shape_fn((200, 2), |_| normal(&mut rng) as f32);
        let y: Vec<usize> = x
            .outer_iter()
            .map(|r| usize::from(r[0] + r[1] > 0.0))
            .collect();
        let mut net = Mlp::new(&[2, 16, 2], &mut rng);
        let opt = Adam {
            lr: 0.02,
            ..Adam::default()
        };
        for _ in 0..400 {
            net.train_step(&x.view(), &y, &opt);
        }
        let p = net.predict(&x.view());
        let acc = p.iter().zip(&y).filter(|(a, b)| a == b).count() as f64 / 200.0;
        assert!(acc > 0.95, "accuracy {acc}");
    }
}
