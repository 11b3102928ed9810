//! Source-filter speech synthesis for the demo scenario (16 kHz): a Rosenberg glottal pulse
//! train with talker-specific pitch, jitter, shimmer and breathiness, passed through five
//! cascaded second-order formant resonators (Klatt 1980, "Software for a cascade/parallel
//! formant synthesizer", JASA 67) for vowels; band-pass shaped noise for the fricatives
//! /s/, /sh/, /f/; silences between words. Vowel targets are the average formant frequencies
//! of Peterson & Barney (1952, "Control methods used in a study of the vowels", JASA 24) for
//! men, women and children, scaled by each talker's vocal-tract-length factor. Formant
//! tracks are interpolated between neighbouring targets (coarticulation), and each talker has
//! its own spectral tilt and channel colouring, so speaker identity is present in the
//! features the recogniser sees.

use rand::Rng;
use rand_chacha::ChaCha8Rng;

/// Sample rate of the synthetic speech.
pub const FS: f64 = 16_000.0;

/// Phone inventory: silence, ten vowels (Peterson & Barney's set, ARPAbet names), three
/// fricatives. The index is the class number the network learns.
pub const PHONES: [&str; 14] = [
    "sil", "iy", "ih", "eh", "ae", "ah", "aa", "ao", "uh", "uw", "er", "s", "sh", "f",
];

/// Index of the first fricative in [`PHONES`].
const FIRST_FRICATIVE: usize = 11;

/// Average F1, F2, F3 (Hz) per vowel, in the order of `PHONES[1..=10]`, for men, women and
/// children. Peterson & Barney (1952), Table II — from memory.
const PB_MEN: [[f64; 3]; 10] = [
    [270.0, 2290.0, 3010.0],
    [390.0, 1990.0, 2550.0],
    [530.0, 1840.0, 2480.0],
    [660.0, 1720.0, 2410.0],
    [520.0, 1190.0, 2390.0],
    [730.0, 1090.0, 2440.0],
    [570.0, 840.0, 2410.0],
    [440.0, 1020.0, 2240.0],
    [300.0, 870.0, 2240.0],
    [490.0, 1350.0, 1690.0],
];
const PB_WOMEN: [[f64; 3]; 10] = [
    [310.0, 2790.0, 3310.0],
    [430.0, 2480.0, 3070.0],
    [610.0, 2330.0, 2990.0],
    [860.0, 2050.0, 2850.0],
    [760.0, 1400.0, 2780.0],
    [850.0, 1220.0, 2810.0],
    [590.0, 920.0, 2710.0],
    [470.0, 1160.0, 2680.0],
    [370.0, 950.0, 2670.0],
    [500.0, 1640.0, 1960.0],
];
const PB_CHILDREN: [[f64; 3]; 10] = [
    [370.0, 3200.0, 3730.0],
    [530.0, 2730.0, 3600.0],
    [690.0, 2610.0, 3570.0],
    [1010.0, 2320.0, 3320.0],
    [850.0, 1590.0, 3360.0],
    [1030.0, 1370.0, 3170.0],
    [680.0, 1060.0, 3180.0],
    [560.0, 1410.0, 3310.0],
    [430.0, 1170.0, 3260.0],
    [560.0, 1820.0, 2160.0],
];

/// Talker group: the extra label column of the demo captures.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Group {
    /// Adult male.
    AdultMale,
    /// Adult female.
    AdultFemale,
    /// Boy.
    ChildMale,
    /// Girl.
    ChildFemale,
}

impl Group {
    /// All groups in label order.
    pub const ALL: [Group; 4] = [
        Group::AdultMale,
        Group::AdultFemale,
        Group::ChildMale,
        Group::ChildFemale,
    ];

    /// Label written to `frames.tsv`.
    pub fn label(self) -> &'static str {
        match self {
            Group::AdultMale => "adult_male",
            Group::AdultFemale => "adult_female",
            Group::ChildMale => "child_male",
            Group::ChildFemale => "child_female",
        }
    }

    /// Short prefix for talker names.
    fn prefix(self) -> &'static str {
        match self {
            Group::AdultMale => "am",
            Group::AdultFemale => "af",
            Group::ChildMale => "cm",
            Group::ChildFemale => "cf",
        }
    }

    /// Vowel table, mean F0 (Hz), and scale of the higher formants and fricative poles.
    /// Mean F0 per group is Peterson & Barney's (about 132, 223, 264 Hz) — from memory.
    fn base(self) -> (&'static [[f64; 3]; 10], f64, f64) {
        match self {
            Group::AdultMale => (&PB_MEN, 130.0, 1.0),
            Group::AdultFemale => (&PB_WOMEN, 220.0, 1.12),
            // Boys' tracts are a little longer than girls' on average (common practice).
            Group::ChildMale => (&PB_CHILDREN, 255.0, 1.22),
            Group::ChildFemale => (&PB_CHILDREN, 270.0, 1.26),
        }
    }
}

/// One synthetic talker: everything that makes its voice its own.
#[derive(Clone, Debug)]
pub struct Talker {
    /// Name, e.g. `af03`.
    pub name: String,
    /// Group (the extra label).
    pub group: Group,
    /// Mean F0 in Hz.
    pub f0: f64,
    /// Period-to-period jitter (relative standard deviation).
    pub jitter: f64,
    /// Pulse amplitude shimmer (relative standard deviation).
    pub shimmer: f64,
    /// Aspiration noise relative to the voiced source.
    pub breathiness: f64,
    /// Open quotient of the glottal pulse.
    pub open_quotient: f64,
    /// Vocal-tract-length factor on every formant (1: group average).
    pub vtl: f64,
    /// Idiosyncratic relative offsets of F1, F2, F3.
    pub formant_bias: [f64; 3],
    /// Extra source tilt: one-pole low-pass coefficient (0: none).
    pub tilt: f64,
    /// Channel colouring: peaking-filter centre (Hz), gain (dB), quality.
    pub channel: (f64, f64, f64),
    /// Second channel colouring band (a notch or peak elsewhere).
    pub channel2: (f64, f64, f64),
    /// Third channel colouring band (high frequencies).
    pub channel3: (f64, f64, f64),
    /// Speaking-rate factor on durations.
    pub rate: f64,
    /// Level of the background noise floor (relative to speech RMS).
    pub noise_floor: f64,
}

/// A standard normal deviate (Box–Muller).
pub fn normal(rng: &mut ChaCha8Rng) -> f64 {
    let u1: f64 = rng.random::<f64>().max(1e-300);
    let u2: f64 = rng.random::<f64>();
    (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
}

impl Talker {
    /// Draw talker number `index` (1-based within its group) of `group`.
    pub fn draw(group: Group, index: usize, rng: &mut ChaCha8Rng) -> Talker {
        let (_, f0, _) = group.base();
        let mut n = || normal(rng);
        let f0 = f0 * (1.0 + 0.1 * n()).clamp(0.75, 1.3);
        let jitter = 0.005 + 0.01 * n().abs();
        let shimmer = 0.03 + 0.04 * n().abs();
        let breathiness = 0.02 + 0.08 * n().abs();
        let open_quotient = (0.55 + 0.08 * n()).clamp(0.4, 0.75);
        let vtl = (1.0 + 0.07 * n()).clamp(0.86, 1.14);
        let formant_bias = [0.04 * n(), 0.04 * n(), 0.03 * n()];
        let tilt = (0.35 + 0.3 * n()).clamp(0.0, 0.85);
        let mut u = |lo: f64, hi: f64| lo + (hi - lo) * rng.random::<f64>();
        let channel = (u(200.0, 1500.0), u(-10.0, 10.0), u(0.7, 2.0));
        let channel2 = (u(1500.0, 4000.0), u(-10.0, 10.0), u(0.7, 2.5));
        let channel3 = (u(4000.0, 7500.0), u(-12.0, 10.0), u(0.7, 2.5));
        let rate = u(0.85, 1.2);
        let noise_floor = 10f64.powf(u(-3.5, -2.2));
        Talker {
            name: format!("{}{:02}", group.prefix(), index),
            group,
            f0,
            jitter,
            shimmer,
            breathiness,
            open_quotient,
            vtl,
            formant_bias,
            tilt,
            channel,
            channel2,
            channel3,
            rate,
            noise_floor,
        }
    }

    /// F1..F5 target of vowel `v` (phone index 1..=10) for this talker.
    fn vowel_formants(&self, v: usize) -> [f64; 5] {
        let (table, _, hi) = self.group.base();
        let t = table[v - 1];
        let s = self.vtl;
        [
            t[0] * s * (1.0 + self.formant_bias[0]),
            t[1] * s * (1.0 + self.formant_bias[1]),
            t[2] * s * (1.0 + self.formant_bias[2]),
            3500.0 * hi * s,
            4500.0 * hi * s,
        ]
    }

    /// Formant bandwidths (Hz), wider for shorter tracts (common practice).
    fn bandwidths(&self) -> [f64; 5] {
        let (_, _, hi) = self.group.base();
        let k = (hi * self.vtl).sqrt();
        [70.0 * k, 90.0 * k, 140.0 * k, 220.0 * k, 300.0 * k]
    }

    /// Spectral scale for fricative poles.
    fn fricative_scale(&self) -> f64 {
        let (_, _, hi) = self.group.base();
        (hi * self.vtl).sqrt()
    }
}

/// One phone segment of an utterance, in samples.
#[derive(Clone, Copy, Debug)]
pub struct Segment {
    /// Phone index into [`PHONES`].
    pub phone: usize,
    /// First sample.
    pub start: usize,
    /// One past the last sample.
    pub end: usize,
}

/// Draw the phone sequence of one utterance: leading and trailing silence, two to four
/// command words of one to three syllables ((fricative) vowel), pauses between some words.
pub fn draw_phones(talker: &Talker, rng: &mut ChaCha8Rng) -> Vec<Segment> {
    let mut segs = Vec::new();
    let mut t = 0usize;
    let mut push = |phone: usize, dur_s: f64, t: &mut usize| {
        let n = (dur_s * FS).round() as usize;
        segs.push(Segment {
            phone,
            start: *t,
            end: *t + n,
        });
        *t += n;
    };
    let r = talker.rate;
    push(0, rng.random_range(0.10..0.22), &mut t);
    let words = rng.random_range(2..=4);
    for w in 0..words {
        let syll = rng.random_range(1..=3);
        for _ in 0..syll {
            if rng.random::<f64>() < 0.6 {
                let f = rng.random_range(FIRST_FRICATIVE..PHONES.len());
                push(f, rng.random_range(0.06..0.13) * r, &mut t);
            }
            let v = rng.random_range(1..FIRST_FRICATIVE);
            push(v, rng.random_range(0.07..0.18) * r, &mut t);
        }
        if w + 1 < words && rng.random::<f64>() < 0.5 {
            push(0, rng.random_range(0.05..0.14), &mut t);
        }
    }
    push(0, rng.random_range(0.10..0.22), &mut t);
    segs
}

/// Klatt's second-order resonator with coefficients that may change at every sample.
#[derive(Clone, Copy, Default)]
struct Resonator {
    a: f64,
    b: f64,
    c: f64,
    y1: f64,
    y2: f64,
}

impl Resonator {
    /// Set centre frequency and bandwidth (Hz); unity gain at 0 Hz (Klatt 1980, eq. 2).
    fn set(&mut self, f: f64, bw: f64) {
        let t = 1.0 / FS;
        let r = (-std::f64::consts::PI * bw * t).exp();
        self.c = -r * r;
        self.b = 2.0 * r * (2.0 * std::f64::consts::PI * f * t).cos();
        self.a = 1.0 - self.b - self.c;
    }

    fn step(&mut self, x: f64) -> f64 {
        let y = self.a * x + self.b * self.y1 + self.c * self.y2;
        self.y2 = self.y1;
        self.y1 = y;
        y
    }
}

/// A biquad peaking equaliser (RBJ audio-EQ cookbook), for channel colouring.
struct Peaking {
    b: [f64; 3],
    a: [f64; 2],
    x: [f64; 2],
    y: [f64; 2],
}

impl Peaking {
    fn new(f: f64, gain_db: f64, q: f64) -> Self {
        let a = 10f64.powf(gain_db / 40.0);
        let w = 2.0 * std::f64::consts::PI * f / FS;
        let alpha = w.sin() / (2.0 * q);
        let a0 = 1.0 + alpha / a;
        Peaking {
            b: [
                (1.0 + alpha * a) / a0,
                -2.0 * w.cos() / a0,
                (1.0 - alpha * a) / a0,
            ],
            a: [-2.0 * w.cos() / a0, (1.0 - alpha / a) / a0],
            x: [0.0; 2],
            y: [0.0; 2],
        }
    }

    fn step(&mut self, x: f64) -> f64 {
        let y = self.b[0] * x + self.b[1] * self.x[0] + self.b[2] * self.x[1]
            - self.a[0] * self.y[0]
            - self.a[1] * self.y[1];
        self.x = [x, self.x[0]];
        self.y = [y, self.y[0]];
        y
    }
}

/// Raised-cosine ramp envelope of a segment with `ramp` samples at each end.
fn envelope(i: usize, start: usize, end: usize, ramp: usize) -> f64 {
    if i < start || i >= end {
        return 0.0;
    }
    let k = (i - start).min(end - 1 - i) as f64;
    let r = ramp as f64;
    if k >= r {
        1.0
    } else {
        0.5 - 0.5 * (std::f64::consts::PI * (k + 0.5) / r).cos()
    }
}

/// Formant key points: vowels hold their target over their middle 40 %, fricatives pull
/// F1 down and F2 toward their locus; silence has none, so tracks glide across it.
fn formant_keys(talker: &Talker, segs: &[Segment]) -> Vec<(f64, [f64; 5])> {
    let mut keys: Vec<(f64, [f64; 5])> = Vec::new();
    let vowel_near = |i: usize| -> Option<[f64; 5]> {
        let after = segs[i..]
            .iter()
            .find(|s| (1..FIRST_FRICATIVE).contains(&s.phone));
        let before = segs[..i]
            .iter()
            .rev()
            .find(|s| (1..FIRST_FRICATIVE).contains(&s.phone));
        after.or(before).map(|s| talker.vowel_formants(s.phone))
    };
    for (i, s) in segs.iter().enumerate() {
        let len = (s.end - s.start) as f64;
        if (1..FIRST_FRICATIVE).contains(&s.phone) {
            let f = talker.vowel_formants(s.phone);
            keys.push((s.start as f64 + 0.3 * len, f));
            keys.push((s.start as f64 + 0.7 * len, f));
        } else if s.phone >= FIRST_FRICATIVE {
            if let Some(mut f) = vowel_near(i) {
                // Loci (Hz, adult male) for alveolar, post-alveolar, labiodental places,
                // common practice; scaled like the talker's tract.
                let locus = [1800.0, 2200.0, 1100.0][s.phone - FIRST_FRICATIVE]
                    * talker.vtl
                    * talker.fricative_scale();
                f[0] *= 0.6;
                f[1] = 0.5 * f[1] + 0.5 * locus;
                keys.push((s.start as f64 + 0.5 * len, f));
            }
        }
    }
    keys
}

fn interp(keys: &[(f64, [f64; 5])], t: f64) -> [f64; 5] {
    match keys.iter().position(|k| k.0 > t) {
        None => keys
            .last()
            .map(|k| k.1)
            .unwrap_or([500.0, 1500.0, 2500.0, 3500.0, 4500.0]),
        Some(0) => keys[0].1,
        Some(j) => {
            let (t0, a) = keys[j - 1];
            let (t1, b) = keys[j];
            let w = ((t - t0) / (t1 - t0).max(1.0)).clamp(0.0, 1.0);
            let mut out = [0.0; 5];
            for k in 0..5 {
                out[k] = a[k] + w * (b[k] - a[k]);
            }
            out
        }
    }
}

/// A synthesised utterance: its samples and, per sample, the fundamental frequency of the
/// glottal source where the voicing amplitude is at least half its full level (NaN elsewhere).
pub struct Synthesised {
    /// Samples at [`FS`].
    pub wave: Vec<f32>,
    /// F0 in Hz per sample (the declining contour, without jitter); NaN where unvoiced.
    pub f0: Vec<f32>,
}

/// Synthesise the samples of an utterance from its phone segments.
pub fn synthesise(talker: &Talker, segs: &[Segment], rng: &mut ChaCha8Rng) -> Synthesised {
    let n = segs.last().map(|s| s.end).unwrap_or(0);
    let ramp = (0.012 * FS) as usize;
    let (voice, fric) = amplitudes(segs, n, ramp);
    let (src, contour) = glottal_source(talker, &voice, rng);
    let mut out = formant_cascade(talker, segs, &src);
    add_fricatives(talker, segs, &fric, ramp, &mut out, rng);
    let f0 = contour
        .iter()
        .zip(&voice)
        .map(|(&f, &v)| if v >= 0.5 { f as f32 } else { f32::NAN })
        .collect();
    Synthesised {
        wave: finish(talker, &out, rng),
        f0,
    }
}

/// Voicing and frication amplitude per sample (`n` samples): each segment's envelope, ramped
/// over `ramp` samples across its edges.
fn amplitudes(segs: &[Segment], n: usize, ramp: usize) -> (Vec<f64>, Vec<f64>) {
    let mut voice = vec![0f64; n];
    let mut fric = vec![0f64; n];
    for s in segs {
        if s.phone == 0 {
            continue;
        }
        let target = if s.phone < FIRST_FRICATIVE {
            &mut voice
        } else {
            &mut fric
        };
        let lo = s.start.saturating_sub(ramp / 2);
        let hi = (s.end + ramp / 2).min(n);
        for (i, v) in target.iter_mut().enumerate().take(hi).skip(lo) {
            *v = v.max(envelope(i, lo, hi, ramp));
        }
    }
    (voice, fric)
}

/// Glottal source: Rosenberg pulses with jitter and shimmer, F0 declining over the
/// utterance, differentiated for lip radiation, plus aspiration noise while open; scaled by
/// the voicing amplitude `voice`. Also returns the F0 contour per sample (Hz, no jitter).
fn glottal_source(talker: &Talker, voice: &[f64], rng: &mut ChaCha8Rng) -> (Vec<f64>, Vec<f64>) {
    let n = voice.len();
    let utt_f0 = talker.f0 * (1.0 + 0.05 * normal(rng));
    let mut src = vec![0f64; n];
    let mut open = vec![0f64; n];
    let mut contour = vec![0f64; n];
    let mut t = 0usize;
    while t < n {
        let decl = 1.0 + 0.08 * (0.5 - t as f64 / n as f64);
        let period = FS / (utt_f0 * decl) * (1.0 + talker.jitter * normal(rng));
        let p = period.round().max(8.0) as usize;
        let amp = 1.0 + talker.shimmer * normal(rng);
        let tp = (talker.open_quotient * 0.7 * p as f64).max(2.0);
        let tn = (talker.open_quotient * 0.3 * p as f64).max(1.0);
        for k in 0..p {
            if t + k >= n {
                break;
            }
            let x = k as f64;
            let g = if x < tp {
                0.5 * (1.0 - (std::f64::consts::PI * x / tp).cos())
            } else if x < tp + tn {
                (std::f64::consts::PI * (x - tp) / (2.0 * tn)).cos()
            } else {
                0.0
            };
            src[t + k] = amp * g;
            open[t + k] = g;
            contour[t + k] = utt_f0 * decl;
        }
        t += p;
    }
    let mut prev = 0.0;
    let mut lp = 0.0;
    for i in 0..n {
        let d = src[i] - prev;
        prev = src[i];
        let asp = talker.breathiness * 0.2 * open[i] * normal(rng);
        lp = (1.0 - talker.tilt) * (d + asp) + talker.tilt * lp;
        src[i] = lp * voice[i];
    }
    (src, contour)
}

/// Cascade of five formant resonators over `src`, with tracks updated every millisecond.
fn formant_cascade(talker: &Talker, segs: &[Segment], src: &[f64]) -> Vec<f64> {
    let keys = formant_keys(talker, segs);
    let bws = talker.bandwidths();
    let mut res = [Resonator::default(); 5];
    let mut out = vec![0f64; src.len()];
    for i in 0..src.len() {
        if i % 16 == 0 {
            let f = interp(&keys, i as f64);
            for k in 0..5 {
                res[k].set(f[k], bws[k]);
            }
        }
        let mut y = src[i];
        for r in res.iter_mut() {
            y = r.step(y);
        }
        out[i] = y;
    }
    out
}

/// Fricatives: white noise through pole pairs placed per place of articulation
/// (s: high, sh: mid, f: flat and weak; common practice), nudged by the next vowel's F2,
/// added to `out` at the frication amplitude `fric` relative to the voiced level.
fn add_fricatives(
    talker: &Talker,
    segs: &[Segment],
    fric: &[f64],
    ramp: usize,
    out: &mut [f64],
    rng: &mut ChaCha8Rng,
) {
    let n = out.len();
    let voiced_rms = (out.iter().map(|v| v * v).sum::<f64>() / n.max(1) as f64)
        .sqrt()
        .max(1e-9);
    let fs_scale = talker.fricative_scale();
    for (i, s) in segs.iter().enumerate() {
        if s.phone < FIRST_FRICATIVE {
            continue;
        }
        let next_f2 = segs[i + 1..]
            .iter()
            .find(|x| (1..FIRST_FRICATIVE).contains(&x.phone))
            .map(|x| talker.vowel_formants(x.phone)[1])
            .unwrap_or(1500.0);
        let round = 0.96 + 0.04 * (next_f2 / 2500.0).min(1.2);
        let (poles, level): (&[(f64, f64, f64)], f64) = match s.phone - FIRST_FRICATIVE {
            0 => (&[(5200.0, 1400.0, 1.0), (7200.0, 1500.0, 0.5)], 0.55),
            1 => (&[(2700.0, 700.0, 1.0), (4300.0, 1200.0, 0.5)], 0.6),
            _ => (&[(1800.0, 2500.0, 0.4), (5000.0, 4000.0, 1.0)], 0.18),
        };
        let lo = s.start.saturating_sub(ramp);
        let hi = (s.end + ramp).min(n);
        let mut bank: Vec<(Resonator, f64)> = poles
            .iter()
            .map(|&(f, bw, g)| {
                let mut r = Resonator::default();
                r.set((f * fs_scale * round).min(7600.0), bw * fs_scale);
                (r, g)
            })
            .collect();
        let mut hp = 0.0;
        for j in lo..hi {
            let w = normal(rng);
            // First difference removes the low end, as the front cavity does.
            let x = w - hp;
            hp = w;
            let y: f64 = bank.iter_mut().map(|(r, g)| *g * r.step(x)).sum();
            out[j] += level * voiced_rms * 2.5 * fric[j] * y;
        }
    }
}

/// Loudness normalisation, then the talker's room noise floor, then its channel colouring
/// (microphone and room), which colours the pauses as well as the speech.
fn finish(talker: &Talker, out: &[f64], rng: &mut ChaCha8Rng) -> Vec<f32> {
    let rms = (out.iter().map(|v| v * v).sum::<f64>() / out.len().max(1) as f64)
        .sqrt()
        .max(1e-12);
    let gain = 0.1 / rms * 10f64.powf(0.15 * normal(rng) / 2.0);
    let mut eq1 = Peaking::new(talker.channel.0, talker.channel.1, talker.channel.2);
    let mut eq2 = Peaking::new(talker.channel2.0, talker.channel2.1, talker.channel2.2);
    let mut eq3 = Peaking::new(talker.channel3.0, talker.channel3.1, talker.channel3.2);
    out.iter()
        .map(|v| {
            let x = v * gain + 0.1 * talker.noise_floor * normal(rng);
            eq3.step(eq2.step(eq1.step(x))) as f32
        })
        .collect()
}

/// Phone label of a sample position (the segment that holds it; silence past the end).
pub fn phone_at(segs: &[Segment], sample: usize) -> usize {
    segs.iter()
        .find(|s| s.start <= sample && sample < s.end)
        .map(|s| s.phone)
        .unwrap_or(0)
}
