//! Train/test splits grouped so that nothing leaks between the sides: speaker-disjoint (no
//! test speaker was heard in training), utterance-disjoint (no test utterance was seen), with
//! the variant the speaker task needs (utterance-disjoint, every speaker on both sides), or
//! plain frame splits. Grouped N-fold cross-validation assigns whole groups to folds. Every
//! split comes with a check that proves what it promises on the items actually used.

use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use serde::{Deserialize, Serialize};

/// How items are grouped when split.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum SplitKind {
    /// Speaker-disjoint for every task but `speaker`, which gets a per-speaker utterance split.
    Auto,
    /// No speaker on both sides.
    Speaker,
    /// No utterance on both sides.
    Utterance,
    /// Items split at random (frames of one utterance may fall on both sides).
    Frame,
}

impl SplitKind {
    /// Name as on the command line.
    pub fn name(&self) -> &'static str {
        match self {
            SplitKind::Auto => "auto",
            SplitKind::Speaker => "speaker",
            SplitKind::Utterance => "utterance",
            SplitKind::Frame => "frame",
        }
    }

    /// The concrete split for a task (`auto` resolved).
    pub fn resolve(self, speaker_task: bool) -> SplitKind {
        match self {
            SplitKind::Auto if speaker_task => SplitKind::Utterance,
            SplitKind::Auto => SplitKind::Speaker,
            k => k,
        }
    }
}

impl std::str::FromStr for SplitKind {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, String> {
        match s {
            "auto" => Ok(SplitKind::Auto),
            "speaker" => Ok(SplitKind::Speaker),
            "utterance" => Ok(SplitKind::Utterance),
            "frame" => Ok(SplitKind::Frame),
            _ => Err(format!(
                "expected auto, speaker, utterance or frame, found '{s}'"
            )),
        }
    }
}

/// How many folds to use: `auto` (grouped K-fold, K = 5 or fewer when groups are fewer,
/// whenever one split would test on fewer than [`AUTO_MIN_TEST_GROUPS`] groups; otherwise one
/// split), or a fixed number (1: one split).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum FoldCount {
    /// Folds when one split would test on too few groups.
    Auto,
    /// This many folds.
    Fixed(usize),
}

/// Folds `auto` uses when one split would test on too few groups.
pub const AUTO_FOLDS: usize = 5;

/// Fewest test groups (speakers; utterances for the speaker task) a single split may have
/// before `auto` switches to folds (common practice, our choice).
pub const AUTO_MIN_TEST_GROUPS: usize = 10;

impl std::str::FromStr for FoldCount {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, String> {
        if s == "auto" {
            return Ok(FoldCount::Auto);
        }
        s.parse::<usize>()
            .map(FoldCount::Fixed)
            .map_err(|_| format!("expected auto or a whole number, found '{s}'"))
    }
}

impl Serialize for FoldCount {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        match self {
            FoldCount::Auto => s.serialize_str("auto"),
            FoldCount::Fixed(n) => s.serialize_u64(*n as u64),
        }
    }
}

/// The number of test groups one split would have: `test_fraction` of the groups, at least
/// one and not all (for the speaker task's split, summed over speakers).
fn single_split_test_groups(
    kind: SplitKind,
    speaker_task: bool,
    utt: &[u32],
    speaker: &[u32],
    test_fraction: f64,
) -> (usize, usize) {
    let share = |m: usize| ((test_fraction * m as f64).round() as usize).clamp(1, m.max(2) - 1);
    let distinct = |v: &[u32]| {
        let mut v = v.to_vec();
        v.sort_unstable();
        v.dedup();
        v.len()
    };
    let kind = kind.resolve(speaker_task);
    if speaker_task && kind == SplitKind::Utterance {
        let mut pairs: Vec<(u32, u32)> = speaker.iter().copied().zip(utt.iter().copied()).collect();
        pairs.sort_unstable();
        pairs.dedup();
        let mut test = 0;
        let mut i = 0;
        while i < pairs.len() {
            let j = pairs[i..].iter().take_while(|p| p.0 == pairs[i].0).count();
            test += share(j);
            i += j;
        }
        return (test, pairs.len());
    }
    let m = match kind {
        SplitKind::Speaker => distinct(speaker),
        SplitKind::Utterance => distinct(utt),
        _ => utt.len(),
    };
    (share(m), m)
}

/// The number of folds `count` means for these items: `auto` gives K = [`AUTO_FOLDS`] (fewer
/// when there are fewer groups) when one split would test on fewer than
/// [`AUTO_MIN_TEST_GROUPS`] groups, else 1.
pub fn resolve_folds(
    count: FoldCount,
    kind: SplitKind,
    speaker_task: bool,
    utt: &[u32],
    speaker: &[u32],
    test_fraction: f64,
) -> usize {
    match count {
        FoldCount::Fixed(n) => n,
        FoldCount::Auto => {
            let (test, groups) =
                single_split_test_groups(kind, speaker_task, utt, speaker, test_fraction);
            if test < AUTO_MIN_TEST_GROUPS && groups >= 2 {
                AUTO_FOLDS.min(groups)
            } else {
                1
            }
        }
    }
}

/// Split settings.
#[derive(Clone, Debug)]
pub struct SplitOptions {
    /// Share of groups held out for testing (single split).
    pub test_fraction: f64,
    /// Number of folds; 1 means one train/test split.
    pub folds: usize,
}

impl Default for SplitOptions {
    fn default() -> Self {
        SplitOptions {
            test_fraction: 0.25,
            folds: 1,
        }
    }
}

/// One train/test partition of item indices.
#[derive(Clone, Debug, Serialize)]
pub struct Fold {
    /// Training items.
    pub train: Vec<usize>,
    /// Test items.
    pub test: Vec<usize>,
}

/// A resolved split: its kind, whether every speaker is kept on both sides, and its folds.
#[derive(Clone, Debug, Serialize)]
pub struct Split {
    /// Concrete kind (never `Auto`).
    pub kind: SplitKind,
    /// Utterance split that keeps every speaker on both sides (the speaker task).
    pub every_speaker_both_sides: bool,
    /// Folds (one for a single split).
    pub folds: Vec<Fold>,
}

/// Build the split of a task's items. `utt` and `speaker` give each item's utterance and
/// speaker; `speaker_task` selects the per-speaker utterance split under `Auto`/`Utterance`.
/// Errors are messages for the user (bad input).
pub fn make_split(
    kind: SplitKind,
    speaker_task: bool,
    utt: &[u32],
    speaker: &[u32],
    opts: &SplitOptions,
    seed: u64,
) -> Result<Split, String> {
    let kind = kind.resolve(speaker_task);
    let folds = opts.folds.max(1);
    if !(opts.test_fraction > 0.0 && opts.test_fraction < 1.0) {
        return Err(format!(
            "--test-fraction: expected a share between 0 and 1, found {}",
            opts.test_fraction
        ));
    }
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let n = utt.len();
    let every = speaker_task && kind == SplitKind::Utterance;
    if kind == SplitKind::Speaker && speaker_task {
        return Err("--split speaker cannot be used for the speaker task: no test speaker would be in training; use --split auto or utterance".into());
    }
    // Assign each item a fold (its test fold).
    let fold_of: Vec<usize> = if every {
        within_speaker_folds(utt, speaker, folds, opts.test_fraction, &mut rng)?
    } else {
        let group: Vec<u32> = match kind {
            SplitKind::Speaker => speaker.to_vec(),
            SplitKind::Utterance => utt.to_vec(),
            _ => (0..n as u32).collect(),
        };
        group_folds(kind, &group, folds, opts.test_fraction, &mut rng)?
    };
    let out_folds = (0..folds)
        .map(|f| {
            let mut fold = Fold {
                train: Vec::new(),
                test: Vec::new(),
            };
            for (i, &x) in fold_of.iter().enumerate() {
                if x == f {
                    fold.test.push(i);
                } else {
                    fold.train.push(i);
                }
            }
            fold
        })
        .collect();
    Ok(Split {
        kind,
        every_speaker_both_sides: every,
        folds: out_folds,
    })
}

/// Test fold of each item for the speaker task's utterance split: each speaker's utterances
/// are shuffled and dealt over the folds (with one fold, the `test_fraction` share of them,
/// at least one and not all, is the test side), so every speaker is on both sides.
fn within_speaker_folds(
    utt: &[u32],
    speaker: &[u32],
    folds: usize,
    test_fraction: f64,
    rng: &mut ChaCha8Rng,
) -> Result<Vec<usize>, String> {
    let n_spk = speaker.iter().map(|&s| s as usize + 1).max().unwrap_or(0);
    let mut utts_of: Vec<Vec<u32>> = vec![Vec::new(); n_spk];
    for (&u, &s) in utt.iter().zip(speaker) {
        if !utts_of[s as usize].contains(&u) {
            utts_of[s as usize].push(u);
        }
    }
    let n_utt = utt.iter().map(|&u| u as usize + 1).max().unwrap_or(0);
    let total: usize = utts_of.iter().map(|l| l.len()).sum();
    if folds > 1 && folds > total {
        return Err(format!(
            "--folds {folds} is more than the {total} utterances there are to deal over the folds"
        ));
    }
    let mut utt_fold = vec![usize::MAX; n_utt];
    let mut speakers_seen = 0;
    for list in utts_of.iter_mut() {
        if list.is_empty() {
            continue;
        }
        speakers_seen += 1;
        if list.len() < 2 {
            return Err(
                "a speaker with a single utterance cannot be on both sides of an utterance split"
                    .into(),
            );
        }
        list.sort_unstable();
        list.shuffle(rng);
        if folds == 1 {
            let m = list.len();
            let k = ((test_fraction * m as f64).round() as usize).clamp(1, m - 1);
            for (r, &u) in list.iter().enumerate() {
                utt_fold[u as usize] = if r < k { 0 } else { 1 };
            }
        } else {
            let offset = rand::Rng::random_range(rng, 0..folds);
            for (r, &u) in list.iter().enumerate() {
                utt_fold[u as usize] = (offset + r) % folds;
            }
        }
    }
    if speakers_seen < 2 {
        return Err(format!(
            "the speaker task needs at least 2 speakers, found {speakers_seen}"
        ));
    }
    Ok(utt.iter().map(|&u| utt_fold[u as usize]).collect())
}

/// Test fold of each item for a group-disjoint split: the distinct groups (speakers,
/// utterances or items, by `kind`) are shuffled and dealt over the folds (with one fold, the
/// `test_fraction` share of them is the test side).
fn group_folds(
    kind: SplitKind,
    group: &[u32],
    folds: usize,
    test_fraction: f64,
    rng: &mut ChaCha8Rng,
) -> Result<Vec<usize>, String> {
    let mut ids = group.to_vec();
    ids.sort_unstable();
    ids.dedup();
    let what = match kind {
        SplitKind::Speaker => "speakers",
        SplitKind::Utterance => "utterances",
        _ => "items",
    };
    if folds > 1 && folds > ids.len() {
        return Err(format!(
            "--folds {folds} is more than the {} {what} there are to deal over the folds",
            ids.len()
        ));
    }
    let need = folds.max(2);
    if ids.len() < need {
        let hint = if kind == SplitKind::Speaker {
            " (use --split utterance to split within speakers)"
        } else {
            ""
        };
        return Err(format!(
            "a {}-disjoint split needs at least {need} {what}, found {}{hint}",
            kind.name(),
            ids.len()
        ));
    }
    ids.shuffle(rng);
    let mut gf = std::collections::HashMap::new();
    if folds == 1 {
        let m = ids.len();
        let k = ((test_fraction * m as f64).round() as usize).clamp(1, m - 1);
        for (r, &g) in ids.iter().enumerate() {
            gf.insert(g, if r < k { 0 } else { 1 });
        }
    } else {
        for (r, &g) in ids.iter().enumerate() {
            gf.insert(g, r % folds);
        }
    }
    Ok(group.iter().map(|g| gf[g]).collect())
}

/// Result of checking that a split keeps the promise its kind makes.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct LeakageCheck {
    /// What the split promises, in words.
    pub promise: String,
    /// Speakers with items on both sides (summed over folds).
    pub shared_speakers: usize,
    /// Utterances with items on both sides (summed over folds).
    pub shared_utterances: usize,
    /// Items on both sides (summed over folds).
    pub shared_items: usize,
    /// Test speakers absent from training (summed over folds).
    pub test_speakers_not_in_train: usize,
    /// True when the promise holds in every fold.
    pub passed: bool,
}

fn overlap(a: &[u32], b: &[u32]) -> usize {
    let sa: std::collections::BTreeSet<u32> = a.iter().copied().collect();
    let sb: std::collections::BTreeSet<u32> = b.iter().copied().collect();
    sa.intersection(&sb).count()
}

/// Check the split on the items actually used: `folds` may be subsampled versions of the
/// split's folds.
pub fn check_leakage(
    kind: SplitKind,
    every_speaker_both_sides: bool,
    folds: &[Fold],
    utt: &[u32],
    speaker: &[u32],
) -> LeakageCheck {
    let mut c = LeakageCheck {
        promise: String::new(),
        shared_speakers: 0,
        shared_utterances: 0,
        shared_items: 0,
        test_speakers_not_in_train: 0,
        passed: true,
    };
    for f in folds {
        let pick = |v: &[u32], ix: &[usize]| ix.iter().map(|&i| v[i]).collect::<Vec<u32>>();
        let (tr_s, te_s) = (pick(speaker, &f.train), pick(speaker, &f.test));
        let (tr_u, te_u) = (pick(utt, &f.train), pick(utt, &f.test));
        let items: Vec<u32> = f.train.iter().map(|&i| i as u32).collect();
        let test_items: Vec<u32> = f.test.iter().map(|&i| i as u32).collect();
        c.shared_speakers += overlap(&tr_s, &te_s);
        c.shared_utterances += overlap(&tr_u, &te_u);
        c.shared_items += overlap(&items, &test_items);
        let tr_set: std::collections::BTreeSet<u32> = tr_s.iter().copied().collect();
        let mut te_set: Vec<u32> = te_s.clone();
        te_set.sort_unstable();
        te_set.dedup();
        c.test_speakers_not_in_train += te_set.iter().filter(|s| !tr_set.contains(s)).count();
    }
    let (promise, ok) = match kind {
        SplitKind::Speaker => (
            "no speaker on both sides",
            c.shared_speakers == 0 && c.shared_utterances == 0,
        ),
        SplitKind::Utterance if every_speaker_both_sides => (
            "no utterance on both sides; every test speaker also in training",
            c.shared_utterances == 0 && c.test_speakers_not_in_train == 0,
        ),
        SplitKind::Utterance => ("no utterance on both sides", c.shared_utterances == 0),
        _ => (
            "no item on both sides (frames of one utterance may be on both)",
            true,
        ),
    };
    c.promise = promise.to_string();
    c.passed = ok && c.shared_items == 0;
    c
}

#[cfg(test)]
mod tests {
    use super::*;

    fn toy() -> (Vec<u32>, Vec<u32>) {
        // 8 speakers × 5 utterances × 7 items.
        let mut utt = Vec::new();
        let mut spk = Vec::new();
        for s in 0..8u32 {
            for u in 0..5u32 {
                for _ in 0..7 {
                    utt.push(s * 5 + u);
                    spk.push(s);
                }
            }
        }
        (utt, spk)
    }

    #[test]
    fn speaker_split_has_no_overlap() {
        let (utt, spk) = toy();
        for folds in [1, 4] {
            let s = make_split(
                SplitKind::Auto,
                false,
                &utt,
                &spk,
                &SplitOptions {
                    test_fraction: 0.25,
                    folds,
                },
                3,
            )
            .unwrap();
            assert_eq!(s.kind, SplitKind::Speaker);
            let chk = check_leakage(s.kind, false, &s.folds, &utt, &spk);
            assert!(chk.passed && chk.shared_speakers == 0, "{chk:?}");
            for f in &s.folds {
                assert_eq!(f.train.len() + f.test.len(), utt.len());
                assert!(!f.test.is_empty());
            }
        }
        // 25 % of 8 speakers = 2 test speakers.
        let s = make_split(
            SplitKind::Speaker,
            false,
            &utt,
            &spk,
            &SplitOptions::default(),
            3,
        )
        .unwrap();
        let mut test_spk: Vec<u32> = s.folds[0].test.iter().map(|&i| spk[i]).collect();
        test_spk.dedup();
        assert_eq!(test_spk.len(), 2);
    }

    #[test]
    fn speaker_task_split_keeps_every_speaker_on_both_sides() {
        let (utt, spk) = toy();
        for folds in [1, 3] {
            let s = make_split(
                SplitKind::Auto,
                true,
                &utt,
                &spk,
                &SplitOptions {
                    test_fraction: 0.25,
                    folds,
                },
                5,
            )
            .unwrap();
            let chk = check_leakage(s.kind, true, &s.folds, &utt, &spk);
            assert!(
                chk.passed && chk.shared_utterances == 0 && chk.test_speakers_not_in_train == 0,
                "{chk:?}"
            );
        }
    }

    #[test]
    fn auto_folds_follow_the_number_of_test_groups() {
        let (utt, spk) = toy();
        // 8 speakers: one split tests on 2 (< 10), so 5 folds.
        let k = resolve_folds(FoldCount::Auto, SplitKind::Auto, false, &utt, &spk, 0.25);
        assert_eq!(k, 5);
        // 40 speakers (one utterance each): one split tests on 10, so one split.
        let spk40: Vec<u32> = utt.clone();
        let k = resolve_folds(FoldCount::Auto, SplitKind::Auto, false, &utt, &spk40, 0.25);
        assert_eq!(k, 1);
        // 3 speakers: fewer folds than 5.
        let k = resolve_folds(
            FoldCount::Auto,
            SplitKind::Auto,
            false,
            &[0, 1, 2],
            &[0, 1, 2],
            0.25,
        );
        assert_eq!(k, 3);
        // The speaker task counts test utterances: 8 speakers × round(0.25 × 5) = 8 < 10.
        let k = resolve_folds(FoldCount::Auto, SplitKind::Auto, true, &utt, &spk, 0.25);
        assert_eq!(k, 5);
        assert_eq!(
            resolve_folds(FoldCount::Fixed(3), SplitKind::Auto, true, &utt, &spk, 0.25),
            3
        );
        let e = make_split(
            SplitKind::Speaker,
            false,
            &utt,
            &spk,
            &SplitOptions {
                test_fraction: 0.25,
                folds: 9,
            },
            0,
        )
        .unwrap_err();
        assert!(e.contains("--folds 9") && e.contains("8 speakers"), "{e}");
        assert_eq!("auto".parse::<FoldCount>(), Ok(FoldCount::Auto));
        assert_eq!("4".parse::<FoldCount>(), Ok(FoldCount::Fixed(4)));
    }

    #[test]
    fn too_few_speakers_is_refused_with_a_hint() {
        let utt = vec![0, 0, 1, 1];
        let spk = vec![0, 0, 0, 0];
        let e = make_split(
            SplitKind::Speaker,
            false,
            &utt,
            &spk,
            &SplitOptions::default(),
            0,
        )
        .unwrap_err();
        assert!(e.contains("--split utterance"), "{e}");
    }
}
