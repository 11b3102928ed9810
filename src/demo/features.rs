//! Log-mel front end: 25 ms Hamming windows every 10 ms (common practice), magnitude of a
//! 512-point FFT, 40 triangular mel filters from 0 to 8 kHz on the HTK mel scale
//! (mel = 2595 log10(1 + f / 700); Young et al., "The HTK Book"), natural log.

use std::sync::Arc;

use rustfft::num_complex::Complex;
use rustfft::{Fft, FftPlanner};

/// Samples per analysis window (25 ms at 16 kHz).
pub const WIN: usize = 400;
/// Samples per hop (10 ms at 16 kHz).
pub const HOP: usize = 160;
/// FFT length.
const NFFT: usize = 512;
/// Mel channels.
pub const N_MEL: usize = 40;

/// A reusable front end (FFT plan, window, filterbank).
pub struct FrontEnd {
    fft: Arc<dyn Fft<f32>>,
    window: Vec<f32>,
    /// Per channel: first FFT bin and the weights from there.
    filters: Vec<(usize, Vec<f32>)>,
}

fn hz_to_mel(f: f64) -> f64 {
    2595.0 * (1.0 + f / 700.0).log10()
}

fn mel_to_hz(m: f64) -> f64 {
    700.0 * (10f64.powf(m / 2595.0) - 1.0)
}

impl Default for FrontEnd {
    fn default() -> Self {
        Self::new()
    }
}

impl FrontEnd {
    /// Plan the FFT and build the window and filterbank.
    pub fn new() -> Self {
        let fft = FftPlanner::<f32>::new().plan_fft_forward(NFFT);
        let window = (0..WIN)
            .map(|i| {
                (0.54 - 0.46 * (2.0 * std::f64::consts::PI * i as f64 / (WIN - 1) as f64).cos())
                    as f32
            })
            .collect();
        let fs = super::synth::FS;
        let (lo, hi) = (hz_to_mel(0.0), hz_to_mel(fs / 2.0));
        let edges: Vec<f64> = (0..N_MEL + 2)
            .map(|i| mel_to_hz(lo + (hi - lo) * i as f64 / (N_MEL + 1) as f64) * NFFT as f64 / fs)
            .collect();
        let filters = (0..N_MEL)
            .map(|m| {
                let (l, c, r) = (edges[m], edges[m + 1], edges[m + 2]);
                let first = l.floor().max(0.0) as usize;
                let last = (r.ceil() as usize).min(NFFT / 2);
                let w = (first..=last)
                    .map(|k| {
                        let k = k as f64;
                        let v = if k <= c {
                            (k - l) / (c - l)
                        } else {
                            (r - k) / (r - c)
                        };
                        v.max(0.0) as f32
                    })
                    .collect();
                (first, w)
            })
            .collect();
        FrontEnd {
            fft,
            window,
            filters,
        }
    }

    /// Number of frames for `n` samples (windows that fit entirely).
    pub fn n_frames(n: usize) -> usize {
        if n < WIN {
            0
        } else {
            1 + (n - WIN) / HOP
        }
    }

    /// Frame energy in dB relative to a full-scale sine's mean square of 0.5: ten times the
    /// log10 of the Hamming-windowed mean square over 0.5 (common practice), one per frame.
    pub fn energy_db(&self, x: &[f32]) -> Vec<f32> {
        let nf = Self::n_frames(x.len());
        let norm: f32 = self.window.iter().map(|w| w * w).sum();
        (0..nf)
            .map(|f| {
                let s = &x[f * HOP..f * HOP + WIN];
                let e: f32 = s
                    .iter()
                    .zip(&self.window)
                    .map(|(v, w)| (v * w) * (v * w))
                    .sum();
                10.0 * ((e / norm + 1e-12) / 0.5).log10()
            })
            .collect()
    }

    /// 40 log-mel values per frame, frames in order (row-major, frames × 40).
    pub fn log_mel(&self, x: &[f32]) -> Vec<f32> {
        let nf = Self::n_frames(x.len());
        let mut out = Vec::with_capacity(nf * N_MEL);
        let mut buf = vec![Complex::new(0f32, 0f32); NFFT];
        let mut mag = vec![0f32; NFFT / 2 + 1];
        for f in 0..nf {
            let s = &x[f * HOP..f * HOP + WIN];
            for (i, b) in buf.iter_mut().enumerate() {
                *b = if i < WIN {
                    Complex::new(s[i] * self.window[i], 0.0)
                } else {
                    Complex::new(0.0, 0.0)
                };
            }
            self.fft.process(&mut buf);
            for (m, b) in mag.iter_mut().zip(buf.iter()) {
                *m = b.norm();
            }
            for (first, w) in &self.filters {
                let e: f32 = w.iter().zip(&mag[*first..]).map(|(a, b)| a * b).sum();
                out.push((e + 1e-6).ln());
            }
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn frame_count_follows_window_and_hop() {
        // 1 s at 16 kHz, 25 ms windows, 10 ms hop: 1 + (16000 - 400) / 160 = 98 frames.
        assert_eq!(FrontEnd::n_frames(16_000), 98);
        assert_eq!(FrontEnd::n_frames(399), 0);
    }

    #[test]
    fn a_tone_peaks_in_the_mel_channel_that_holds_it() {
        // A 1 kHz tone sits at mel 1000 (the HTK scale is anchored there): channel index
        // round(1000 / (hz_to_mel(8000) / 41)) - 1.
        let fe = FrontEnd::new();
        let x: Vec<f32> = (0..4000)
            .map(|i| (2.0 * std::f32::consts::PI * 1000.0 * i as f32 / 16_000.0).sin())
            .collect();
        let m = fe.log_mel(&x);
        let frame = &m[5 * N_MEL..6 * N_MEL];
        let best = (0..N_MEL)
            .max_by(|&a, &b| frame[a].total_cmp(&frame[b]))
            .unwrap();
        let step = hz_to_mel(8000.0) / (N_MEL + 1) as f64;
        let want = (hz_to_mel(1000.0) / step).round() as usize - 1;
        assert!(
            (best as i64 - want as i64).abs() <= 1,
            "peak in channel {best}, expected about {want}"
        );
    }
}
