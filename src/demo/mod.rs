//! The demo scenario: a small vowel-and-fricative recogniser for a (fictional)
//! voice-controlled greenhouse irrigation panel. Synthetic talkers ([`synth`]) speak command
//! words built from ten vowels and three fricatives; a log-mel front end ([`features`]) feeds
//! an MLP ([`mlp`]) that learns the phone of each frame from talkers it was trained on. Two
//! checkpoints — early in training and at the end — become captures in the format of
//! `docs/design.md` ([`build`] computes them; `commands::demo` writes them), so every analysis
//! of voxstrata has something real to work on.

pub mod features;
pub mod mlp;
pub mod synth;

use std::fmt::Write as _;

use ndarray::{s, Array2};
use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

use crate::error::{Error, Result};
use crate::Progress;
use features::{FrontEnd, N_MEL};
use mlp::{Adam, Mlp};
use synth::{Group, Talker, PHONES};

/// How big a demo to build.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum DemoSize {
    /// The shipped demo: 32 talkers, over 20 000 captured frames.
    #[default]
    Default,
    /// A few talkers and utterances, for tests (seconds).
    Small,
}

/// Options of the demo scenario.
#[derive(Clone, Debug, Default)]
pub struct DemoOptions {
    /// Seed for talkers, utterances, initial weights and minibatch order.
    pub seed: u64,
    /// Size of the scenario.
    pub size: DemoSize,
}

/// The knobs a size sets.
#[derive(Clone, Copy, Debug)]
struct Scale {
    talkers_per_group: usize,
    heldout_per_group: usize,
    utts_per_talker: usize,
    /// Utterances are taken round-robin over talkers until the capture holds this many frames.
    capture_frames: usize,
    epochs: usize,
    early_steps: usize,
    batch: usize,
}

impl DemoSize {
    fn scale(self) -> Scale {
        match self {
            DemoSize::Default => Scale {
                talkers_per_group: 8,
                heldout_per_group: 2,
                utts_per_talker: 30,
                capture_frames: 20_400,
                epochs: 12,
                early_steps: 60,
                batch: 128,
            },
            DemoSize::Small => Scale {
                talkers_per_group: 2,
                heldout_per_group: 1,
                utts_per_talker: 4,
                capture_frames: usize::MAX,
                epochs: 3,
                early_steps: 10,
                batch: 64,
            },
        }
    }
}

/// Layer-wise step decay of the demo's training: each weight matrix steps 0.7 times as far as
/// the one above it (layer-wise learning-rate decay, as in discriminative fine-tuning; Howard &
/// Ruder 2018). Lower layers settle early and upper layers keep moving, so the two shipped
/// checkpoints differ most near the output, as they do when a real model is trained on.
pub const LAYER_DECAY: f32 = 0.7;

/// Context frames on each side of the centre frame in the network input.
pub const CONTEXT: usize = 2;
/// Hidden layer widths. Narrow enough that both shipped captures (every layer of over
/// 20 000 frames, f16) fit in 25 MB.
pub const HIDDEN: [usize; 5] = [48, 48, 48, 48, 48];

/// What `demo` made, for the CLI to print.
#[derive(Clone, Debug)]
pub struct DemoSummary {
    /// Talkers in all / held out.
    pub talkers: usize,
    /// Held-out talkers.
    pub heldout_talkers: usize,
    /// Frames in each capture.
    pub capture_frames: usize,
    /// Training frames.
    pub train_frames: usize,
    /// Minibatch steps at the early checkpoint and in all.
    pub steps: (usize, usize),
    /// Speaker-disjoint held-out frame accuracy of the early and final checkpoints.
    pub heldout_accuracy: (f64, f64),
}

/// One capture of the scenario, ready to be written as a capture folder.
#[derive(Clone, Debug)]
pub struct ScenarioCapture {
    /// Folder name under the output folder (`early` or `final`).
    pub name: &'static str,
    /// Layers as f16 bits (rows, columns, row-major values), layer 0 first.
    pub layers: Vec<(usize, usize, Vec<u16>)>,
    /// The text of its `capture.toml`.
    pub capture_toml: String,
}

/// The whole demo scenario, computed and held in memory; `commands::demo` writes it.
#[derive(Clone, Debug)]
pub struct Scenario {
    /// The early and the final capture, in that order.
    pub captures: Vec<ScenarioCapture>,
    /// The text of `frames.tsv`, shared by both captures.
    pub frames_tsv: String,
    /// What was made.
    pub summary: DemoSummary,
}

/// Mix a seed with stream numbers (SplitMix64 finaliser; Steele et al. 2014).
fn sub_seed(seed: u64, a: u64, b: u64) -> u64 {
    let mut z =
        seed ^ a.wrapping_mul(0x9E37_79B9_7F4A_7C15) ^ b.wrapping_mul(0xD1B5_4A32_D192_ED03);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// One synthesised utterance after the front end.
struct Utterance {
    name: String,
    talker: usize,
    /// Log-mel frames (frames × 40).
    feats: Array2<f32>,
    /// Phone index per frame.
    phones: Vec<usize>,
    /// F0 in Hz at each frame's centre; NaN where the source is not voiced there.
    f0: Vec<f32>,
    /// Frame energy in dB (see [`FrontEnd::energy_db`]).
    energy_db: Vec<f32>,
}

/// Network inputs and labels of the training and held-out talkers.
struct Sets {
    x_train: Array2<f32>,
    y_train: Vec<usize>,
    x_test: Array2<f32>,
    y_test: Vec<usize>,
}

/// The captured frames: stacked network inputs and their centre (layer 0) frames.
struct Captured {
    x: Array2<f32>,
    centre: Array2<f32>,
}

/// The trained network's two checkpoints and where they were taken.
struct Trained {
    early: Checkpoint,
    fin: Checkpoint,
    early_at: usize,
    total: usize,
}

/// Build the demo scenario in memory: talkers, speech, a trained network's two checkpoints,
/// and the text of the files each capture holds. Writes nothing.
pub fn build(opts: &DemoOptions, progress: &Progress) -> Result<Scenario> {
    let sc = opts.size.scale();
    let (talkers, heldout) = draw_talkers(opts.seed, &sc);
    let utts = synthesise_all(&talkers, &sc, opts.seed, progress);

    let train_utts: Vec<usize> = (0..utts.len())
        .filter(|&i| !heldout[utts[i].talker])
        .collect();
    let test_utts: Vec<usize> = (0..utts.len())
        .filter(|&i| heldout[utts[i].talker])
        .collect();
    let normed = normalise(&utts, &train_utts);
    let (x_train, y_train) = stacked(&normed, &utts, &train_utts);
    let (x_test, y_test) = stacked(&normed, &utts, &test_utts);
    if x_train.nrows() == 0 || x_test.nrows() == 0 {
        return Err(Error::Internal(
            "demo produced no training or test frames".into(),
        ));
    }
    let sets = Sets {
        x_train,
        y_train,
        x_test,
        y_test,
    };

    let cap_utts = choose_captured(&utts, talkers.len(), &sc);
    let (x_cap, _) = stacked(&normed, &utts, &cap_utts);
    let centre: Array2<f32> = x_cap
        .slice(s![.., CONTEXT * N_MEL..(CONTEXT + 1) * N_MEL])
        .to_owned();
    let cap = Captured { x: x_cap, centre };

    let trained = train(&sets, &cap, &sc, opts.seed, progress)?;
    let frames_tsv = frame_table(&utts, &talkers, &cap_utts);

    let heldout_names: Vec<&str> = talkers
        .iter()
        .zip(&heldout)
        .filter(|(_, h)| **h)
        .map(|(t, _)| t.name.as_str())
        .collect();
    let notes = Notes {
        talkers: talkers.len(),
        input_width: sets.x_train.ncols(),
        batch: sc.batch,
        seed: opts.seed,
        total_steps: trained.total,
        training_talkers: heldout.iter().filter(|h| !**h).count(),
        heldout_names: heldout_names.join(" "),
        heldout_frames: sets.y_test.len(),
    };
    let summary = DemoSummary {
        talkers: talkers.len(),
        heldout_talkers: heldout_names.len(),
        capture_frames: cap.x.nrows(),
        train_frames: sets.x_train.nrows(),
        steps: (trained.early_at, trained.total),
        heldout_accuracy: (trained.early.accuracy, trained.fin.accuracy),
    };
    let Trained {
        early,
        fin,
        early_at,
        total,
    } = trained;
    let captures = [("early", early, early_at), ("final", fin, total)]
        .into_iter()
        .map(|(name, ck, steps)| ScenarioCapture {
            name,
            capture_toml: capture_toml(&notes, &ck, name, steps),
            layers: ck.layers,
        })
        .collect();
    Ok(Scenario {
        captures,
        frames_tsv,
        summary,
    })
}

/// Talkers: the same number per group; the last `heldout_per_group` of each are never seen
/// in training (the flags say which).
fn draw_talkers(seed: u64, sc: &Scale) -> (Vec<Talker>, Vec<bool>) {
    let mut talkers = Vec::new();
    let mut heldout = Vec::new();
    for (g, group) in Group::ALL.iter().enumerate() {
        for k in 0..sc.talkers_per_group {
            let mut rng = ChaCha8Rng::seed_from_u64(sub_seed(seed, 1, (g * 1000 + k) as u64));
            heldout.push(k >= sc.talkers_per_group - sc.heldout_per_group);
            talkers.push(Talker::draw(*group, k + 1, &mut rng));
        }
    }
    (talkers, heldout)
}

/// Synthesis and front end, one utterance per task (each with its own seed), talker by
/// talker.
fn synthesise_all(
    talkers: &[Talker],
    sc: &Scale,
    seed: u64,
    progress: &Progress,
) -> Vec<Utterance> {
    let step = progress.step(
        "synthesising speech",
        (talkers.len() * sc.utts_per_talker) as u64,
    );
    let fe = FrontEnd::new();
    let jobs: Vec<(usize, usize)> = (0..talkers.len())
        .flat_map(|t| (0..sc.utts_per_talker).map(move |u| (t, u)))
        .collect();
    jobs.par_iter()
        .map(|&(t, u)| {
            let talker = &talkers[t];
            let mut rng = ChaCha8Rng::seed_from_u64(sub_seed(seed, 2, (t * 100_000 + u) as u64));
            let segs = synth::draw_phones(talker, &mut rng);
            let synth::Synthesised { wave, f0 } = synth::synthesise(talker, &segs, &mut rng);
            let mel = fe.log_mel(&wave);
            let energy_db = fe.energy_db(&wave);
            let nf = mel.len() / N_MEL;
            let feats =
                Array2::from_shape_vec((nf, N_MEL), mel).expect("frames × 40 by construction");
            let centre = |i: usize| i * features::HOP + features::WIN / 2;
            let phones = (0..nf).map(|i| synth::phone_at(&segs, centre(i))).collect();
            let f0 = (0..nf)
                .map(|i| f0.get(centre(i)).copied().unwrap_or(f32::NAN))
                .collect();
            step.inc(1);
            Utterance {
                name: format!("{}_{:03}", talker.name, u + 1),
                talker: t,
                feats,
                phones,
                f0,
                energy_db,
            }
        })
        .collect()
}

/// Normalise each channel with the mean and deviation of the training talkers' frames
/// (one global transform: nothing per talker, so speaker cues stay in the input).
fn normalise(utts: &[Utterance], train_utts: &[usize]) -> Vec<Array2<f32>> {
    let (mean, sd) = channel_stats(utts, train_utts);
    utts.iter()
        .map(|u| {
            let mut f = u.feats.clone();
            for mut row in f.outer_iter_mut() {
                for c in 0..N_MEL {
                    row[c] = (row[c] - mean[c]) / sd[c];
                }
            }
            f
        })
        .collect()
}

/// The captured utterances: round-robin over talkers (utterance 1 of every talker, then
/// utterance 2, ...) until the frame budget is met; returned grouped by talker.
fn choose_captured(utts: &[Utterance], n_talkers: usize, sc: &Scale) -> Vec<usize> {
    let mut chosen = vec![false; utts.len()];
    let mut frames = 0usize;
    'outer: for u in 0..sc.utts_per_talker {
        for t in 0..n_talkers {
            let i = t * sc.utts_per_talker + u;
            chosen[i] = true;
            frames += utts[i].feats.nrows();
            if frames >= sc.capture_frames {
                break 'outer;
            }
        }
    }
    (0..utts.len()).filter(|&i| chosen[i]).collect()
}

/// Training: fixed minibatch order from the seed, single-threaded products; the early
/// checkpoint is taken after `early_steps` minibatches, the final one at the end.
fn train(
    sets: &Sets,
    cap: &Captured,
    sc: &Scale,
    seed: u64,
    progress: &Progress,
) -> Result<Trained> {
    let x_train = &sets.x_train;
    let mut rng = ChaCha8Rng::seed_from_u64(sub_seed(seed, 3, 0));
    let mut net = Mlp::new(&layer_sizes(x_train.ncols()), &mut rng);
    let steps_per_epoch = x_train.nrows().div_ceil(sc.batch);
    let total = sc.epochs * steps_per_epoch;
    let early_at = sc.early_steps.min(total);
    let take = |net: &Mlp| checkpoint(net, &cap.x, &cap.centre, &sets.x_test, &sets.y_test);
    let step = progress.step("training", total as u64);
    let mut early = None;
    let mut done = 0usize;
    let mut order: Vec<usize> = (0..x_train.nrows()).collect();
    let mut xb = Array2::<f32>::zeros((sc.batch, x_train.ncols()));
    for epoch in 0..sc.epochs {
        order.shuffle(&mut rng);
        let opt = epoch_optimiser(epoch, sc.epochs);
        for chunk in order.chunks(sc.batch) {
            if done == early_at {
                early = Some(take(&net));
            }
            let mut xb = xb.slice_mut(s![..chunk.len(), ..]);
            let mut yb = Vec::with_capacity(chunk.len());
            for (r, &i) in chunk.iter().enumerate() {
                xb.row_mut(r).assign(&x_train.row(i));
                yb.push(sets.y_train[i]);
            }
            let loss = net.train_step(&xb.view(), &yb, &opt);
            if !loss.is_finite() {
                return Err(Error::Internal(format!(
                    "demo training diverged at step {done} (loss {loss})"
                )));
            }
            done += 1;
            step.inc(1);
        }
    }
    drop(step);
    let early = match early {
        Some(e) => e,
        None => take(&net),
    };
    Ok(Trained {
        early,
        fin: take(&net),
        early_at,
        total,
    })
}

/// Layer widths of the network: input, the hidden layers, one output per phone.
fn layer_sizes(input: usize) -> Vec<usize> {
    let mut sizes = vec![input];
    sizes.extend_from_slice(&HIDDEN);
    sizes.push(PHONES.len());
    sizes
}

/// The optimiser of one epoch: the step size halves over the last third of the epochs
/// (common practice).
fn epoch_optimiser(epoch: usize, epochs: usize) -> Adam {
    let lr = if epoch * 3 >= epochs * 2 {
        5e-4
    } else {
        1.5e-3
    };
    Adam {
        lr,
        layer_decay: LAYER_DECAY,
        ..Adam::default()
    }
}

/// `frames.tsv`, shared by both captures: one row per captured frame.
fn frame_table(utts: &[Utterance], talkers: &[Talker], cap_utts: &[usize]) -> String {
    let mut tsv = String::from("utterance\tspeaker\tphone\tgroup\tf0_hz\tenergy_db\n");
    for &i in cap_utts {
        let u = &utts[i];
        let t = &talkers[u.talker];
        for (k, &p) in u.phones.iter().enumerate() {
            // F0 only where the frame is voiced and not silence; empty means no value.
            let f0 = u.f0[k];
            let f0 = if p != 0 && f0.is_finite() {
                format!("{f0:.1}")
            } else {
                String::new()
            };
            let _ = writeln!(
                tsv,
                "{}\t{}\t{}\t{}\t{f0}\t{:.1}",
                u.name,
                t.name,
                PHONES[p],
                t.group.label(),
                u.energy_db[k]
            );
        }
    }
    tsv
}

/// The facts both captures' `capture.toml` notes share.
struct Notes {
    talkers: usize,
    input_width: usize,
    batch: usize,
    seed: u64,
    total_steps: usize,
    training_talkers: usize,
    heldout_names: String,
    heldout_frames: usize,
}

/// The text of one capture's `capture.toml`.
fn capture_toml(notes: &Notes, ck: &Checkpoint, name: &str, steps: usize) -> String {
    let mut t = String::new();
    let _ = writeln!(t, "name = \"demo-{name}\"");
    let _ = writeln!(t, "hop_s = 0.01");
    let _ = writeln!(t, "win_s = 0.025");
    let _ = writeln!(t, "\n[notes]");
    let _ = writeln!(
        t,
        "scenario = \"vowel-and-fricative recogniser for a voice-controlled greenhouse irrigation panel; synthetic speech (source-filter, 16 kHz) from {} talkers: adult and child, male and female\"",
        notes.talkers
    );
    let _ = writeln!(
        t,
        "model = \"MLP {}-{}-{} (ReLU), softmax over {} phones (10 vowels, s, sh, f, sil); Adam with layer-wise step decay {LAYER_DECAY} (each layer steps {LAYER_DECAY}x as far as the one above), minibatch {}, seed {}\"",
        notes.input_width,
        HIDDEN.iter().map(|h| h.to_string()).collect::<Vec<_>>().join("-"),
        PHONES.len(),
        PHONES.len(),
        notes.batch,
        notes.seed
    );
    let _ = writeln!(
        t,
        "input = \"40 log-mel channels (25 ms Hamming, 10 ms hop, 512-point FFT magnitude), normalised with training-talker mean and deviation, stacked over +-{CONTEXT} frames\""
    );
    let _ = writeln!(t, "layer_0 = \"the centre 40-d normalised log-mel frame of the network input (the stacked input is this frame and its neighbours)\"");
    let _ = writeln!(
        t,
        "layers = \"layer k (1-{}) is hidden layer k after ReLU\"",
        HIDDEN.len()
    );
    let _ = writeln!(t, "checkpoint = \"{name}\"");
    let _ = writeln!(t, "training_steps = {steps}");
    let _ = writeln!(t, "total_steps = {}", notes.total_steps);
    let _ = writeln!(t, "training_talkers = {}", notes.training_talkers);
    let _ = writeln!(t, "heldout_talkers = \"{}\"", notes.heldout_names);
    let _ = writeln!(t, "heldout_frames = {}", notes.heldout_frames);
    let _ = writeln!(t, "heldout_accuracy = {:.4}", ck.accuracy);
    t
}

/// One checkpoint's capture layers (f16 bits, frames × dim) and held-out accuracy.
struct Checkpoint {
    layers: Vec<(usize, usize, Vec<u16>)>,
    accuracy: f64,
}

fn to_f16(a: &Array2<f32>) -> (usize, usize, Vec<u16>) {
    (
        a.nrows(),
        a.ncols(),
        a.iter()
            .map(|&v| half::f16::from_f32(v).to_bits())
            .collect(),
    )
}

fn checkpoint(
    net: &Mlp,
    x_cap: &Array2<f32>,
    centre: &Array2<f32>,
    x_test: &Array2<f32>,
    y_test: &[usize],
) -> Checkpoint {
    let outs = net.forward_all(&x_cap.view());
    let mut layers = vec![to_f16(centre)];
    layers.extend(outs[..net.n_hidden()].iter().map(to_f16));
    let pred = net.predict(&x_test.view());
    let correct = pred.iter().zip(y_test).filter(|(a, b)| a == b).count();
    Checkpoint {
        layers,
        accuracy: correct as f64 / y_test.len().max(1) as f64,
    }
}

/// Per-channel mean and standard deviation over the frames of `ids`.
fn channel_stats(utts: &[Utterance], ids: &[usize]) -> (Vec<f32>, Vec<f32>) {
    let mut sum = vec![0f64; N_MEL];
    let mut sq = vec![0f64; N_MEL];
    let mut n = 0f64;
    for &i in ids {
        for row in utts[i].feats.outer_iter() {
            for c in 0..N_MEL {
                sum[c] += row[c] as f64;
                sq[c] += (row[c] as f64).powi(2);
            }
            n += 1.0;
        }
    }
    let n = n.max(1.0);
    let mean: Vec<f32> = sum.iter().map(|s| (s / n) as f32).collect();
    let sd = (0..N_MEL)
        .map(|c| ((sq[c] / n - (sum[c] / n).powi(2)).max(1e-6)).sqrt() as f32)
        .collect();
    (mean, sd)
}

/// Network inputs of the utterances `ids`: each frame with ±CONTEXT neighbours (edge frames
/// repeated), and the phone labels.
fn stacked(normed: &[Array2<f32>], utts: &[Utterance], ids: &[usize]) -> (Array2<f32>, Vec<usize>) {
    let n: usize = ids.iter().map(|&i| normed[i].nrows()).sum();
    let width = (2 * CONTEXT + 1) * N_MEL;
    let mut x = Array2::<f32>::zeros((n, width));
    let mut y = Vec::with_capacity(n);
    let mut r = 0;
    for &i in ids {
        let f = &normed[i];
        let nf = f.nrows();
        for t in 0..nf {
            for k in 0..=2 * CONTEXT {
                let src = (t + k).saturating_sub(CONTEXT).min(nf - 1);
                x.slice_mut(s![r, k * N_MEL..(k + 1) * N_MEL])
                    .assign(&f.row(src));
            }
            y.push(utts[i].phones[t]);
            r += 1;
        }
    }
    (x, y)
}
