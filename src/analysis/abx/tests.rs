use super::*;
use crate::capture::{FrameTable, LabelTask, UNLABELLED};
use ndarray::Array2;

/// A frame table from utterances given as (speaker, labels), `-` for an unlabelled frame.
fn table(utts: &[(&str, &str)]) -> FrameTable {
    let (mut utterances, mut utt_speaker, mut speakers) = (vec![], vec![], Vec::<String>::new());
    let (mut frame_utt, mut frame_pos, mut classes, mut codes) =
        (vec![], vec![], Vec::<String>::new(), vec![]);
    let mut spk_codes = vec![];
    for (u, (spk, labels)) in utts.iter().enumerate() {
        utterances.push(format!("u{u}"));
        let s = match speakers.iter().position(|x| x == spk) {
            Some(s) => s,
            None => {
                speakers.push(spk.to_string());
                speakers.len() - 1
            }
        };
        utt_speaker.push(s as u32);
        for (i, l) in labels.split_whitespace().enumerate() {
            frame_utt.push(u as u32);
            frame_pos.push(i as u32);
            spk_codes.push(s as u32);
            codes.push(if l == "-" {
                UNLABELLED
            } else {
                match classes.iter().position(|c| c == l) {
                    Some(c) => c as u32,
                    None => {
                        classes.push(l.to_string());
                        (classes.len() - 1) as u32
                    }
                }
            });
        }
    }
    FrameTable {
        utterances,
        utt_speaker,
        continuous: vec![],
        tasks: vec![
            LabelTask {
                name: "phone".into(),
                classes,
                codes,
            },
            LabelTask {
                name: "speaker".into(),
                classes: speakers.clone(),
                codes: spk_codes,
            },
        ],
        speakers,
        frame_utt,
        frame_pos,
    }
}

/// Frames pointing along the axis of their phone code (plus a small per-frame wobble).
fn phone_axes(t: &FrameTable, rows: &[usize]) -> Array2<f32> {
    let codes = &t.task("phone").unwrap().codes;
    let d = t.task("phone").unwrap().classes.len() + 1;
    Array2::from_shape_fn((rows.len(), d), |(r, j)| {
        let f = rows[r];
        if j as u32 == codes[f] {
            1.0
        } else if j == d - 1 {
            0.1 * ((f * 7919) % 13) as f32 / 13.0
        } else {
            0.0
        }
    })
}

#[test]
fn items_are_runs_with_contexts() {
    // u0: a a b - b c c ; "-" splits the b run into two items, whose neighbours are each other
    let t = table(&[("s1", "a a b - b c c"), ("s1", "c")]);
    let it = AbxItems::new(&t, "phone", 0, 0).unwrap();
    let (a, b, c) = (0u32, 1u32, 2u32);
    let got: Vec<(u32, u32, u32, Vec<usize>)> = it
        .items
        .iter()
        .map(|i| (i.label, i.prev, i.next, i.frames.clone()))
        .collect();
    assert_eq!(
        got,
        vec![
            (a, EDGE, b, vec![0, 1]),
            (b, a, b, vec![2]),
            (b, b, c, vec![4]),
            (c, b, EDGE, vec![5, 6]),
            (c, EDGE, EDGE, vec![7]),
        ]
    );
    assert_eq!(it.rows(), &[0, 1, 2, 4, 5, 6, 7]);
}

#[test]
fn frames_follow_their_position_not_the_table_order() {
    let mut t = table(&[("s1", "a a b")]);
    // store the frames backwards: positions 2, 1, 0
    t.frame_pos = vec![2, 1, 0];
    let it = AbxItems::new(&t, "phone", 0, 0).unwrap();
    // in time order the frames are 2 (b), 1 (a), 0 (a): items b = [2] then a = [1, 0]
    assert_eq!(it.items[0].frames, vec![2]);
    assert_eq!(it.items[1].frames, vec![1, 0]);
    assert_eq!((it.items[1].prev, it.items[1].next), (1, EDGE));
}

#[test]
fn sampling_is_seeded_and_zero_keeps_all() {
    let u = "x a x a x a x a x a x a x a x";
    let t = table(&[("s1", u), ("s1", u)]);
    let all = AbxItems::new(&t, "phone", 0, 3).unwrap();
    let one = AbxItems::new(&t, "phone", 2, 3).unwrap();
    let again = AbxItems::new(&t, "phone", 2, 3).unwrap();
    let other = AbxItems::new(&t, "phone", 2, 4).unwrap();
    assert_eq!(all.items.len(), 30);
    assert_eq!(all.n_found, 30);
    assert_eq!(one.items, again.items);
    assert!(one.items.len() < all.items.len());
    assert!(one.cells.values().all(|c| c.len() <= 2));
    assert!(one.n_capped_cells > 0);
    assert_ne!(one.items, other.items, "another seed draws other items");
}

#[test]
fn separable_phones_have_zero_error_and_counted_triplets() {
    // two speakers; in context (#, #)... use a carrier: x a x, x b x repeated
    let u = "x a a x b b x a x b x";
    let t = table(&[("s1", u), ("s1", u), ("s2", u)]);
    let it = AbxItems::new(&t, "phone", 0, 0).unwrap();
    let x = phone_axes(&t, it.rows());
    let out = layer_records(&it, x.view(), 3).unwrap();
    assert_eq!(out.zero_frames, 0);
    let w = &out.records[0];
    let a = &out.records[1];
    assert_eq!(
        (w.condition.as_str(), a.condition.as_str()),
        ("within", "across")
    );
    assert_eq!(w.error_rate, 0.0);
    assert_eq!(a.error_rate, 0.0);
    // cells: a in context (x,x): s1 has 4 items, s2 has 2; b likewise.
    // within: (a,b) and (b,a); s1: 4·3·4 = 48 triplets, s2: 2·1·2 = 4 -> 2·52 = 104
    assert_eq!((w.n_pairs, w.n_triplets), (2, 104));
    // across: (s1,s2): 4·4·2 = 32, (s2,s1): 2·2·4 = 16; times 2 label pairs = 96
    assert_eq!((a.n_pairs, a.n_triplets), (2, 96));
    // the x items (contexts #/a, a/b, ...) give no triplets: each context holds one label
    assert_eq!(w.layer, 3);
    assert_eq!(it.n_within, 104);
    assert_eq!(it.n_across, 96);
}

#[test]
fn results_do_not_depend_on_the_thread_count() {
    let u = "x a a x b b x a x b x c c x a b x";
    let t = table(&[("s1", u), ("s1", u), ("s2", u), ("s2", u), ("s3", u)]);
    let it = AbxItems::new(&t, "phone", 3, 9).unwrap();
    // noisy frames so that the error rates are not trivial
    let mut s = 1u64;
    let x = Array2::from_shape_fn((it.rows().len(), 5), |_| {
        s = s.wrapping_mul(6364136223846793005).wrapping_add(1);
        (s >> 40) as f32 / (1u64 << 24) as f32 - 0.5
    });
    let run_with = |n: usize| {
        rayon::ThreadPoolBuilder::new()
            .num_threads(n)
            .build()
            .unwrap()
            .install(|| layer_records(&it, x.view(), 0).unwrap())
    };
    let one = run_with(1);
    assert_eq!(one, run_with(2));
    assert_eq!(one, run_with(5));
    assert!(one.records.iter().all(|r| r.error_rate > 0.0));
}

#[test]
fn errors_say_what_is_wrong() {
    let t = table(&[("s1", "a a"), ("s2", "b b")]);
    let e = AbxItems::new(&t, "word", 0, 0).unwrap_err();
    assert!(e.is_input());
    assert!(e.to_string().contains("phone, speaker"), "{e}");
    // each utterance holds one label: no triplet anywhere
    let it = AbxItems::new(&t, "phone", 0, 0).unwrap();
    let e = structure_notes(&it, 0, 0).unwrap_err();
    assert!(matches!(e, AbxError::NoTriplet { .. }));
    assert!(e.to_string().contains("single 'phone' run"), "{e}");
    assert!(e.is_input());
    // NaN in a frame
    let t = table(&[("s1", "x a x b x a x b x")]);
    let it = AbxItems::new(&t, "phone", 0, 0).unwrap();
    let mut x = phone_axes(&t, it.rows());
    x[[2, 1]] = f32::NAN;
    let e = layer_records(&it, x.view(), 4).unwrap_err();
    assert!(matches!(e, AbxError::NonFinite { layer: 4, .. }), "{e}");
    assert!(e.is_input());
    let e = layer_records(&it, x.slice(s![..2, ..]), 4).unwrap_err();
    assert!(!e.is_input());
    assert!(AbxOptions {
        label: " ".into(),
        max_items: 5
    }
    .check()
    .is_err());
    assert!(AbxOptions::default().check().is_ok());
}

#[test]
fn one_speaker_gives_within_only_with_a_note() {
    let t = table(&[("s1", "x a x b x a x b x")]);
    let it = AbxItems::new(&t, "phone", 0, 0).unwrap();
    let notes = structure_notes(&it, 0, 0).unwrap();
    assert!(
        notes.iter().any(|n| n.contains("at least 2 speakers")),
        "{notes:?}"
    );
    let x = phone_axes(&t, it.rows());
    let out = layer_records(&it, x.view(), 0).unwrap();
    assert_eq!(out.records.len(), 1);
    assert_eq!(out.records[0].condition, "within");
}

#[test]
fn zero_frames_are_counted() {
    let t = table(&[("s1", "x a x b x a x b x")]);
    let it = AbxItems::new(&t, "phone", 0, 0).unwrap();
    let mut x = phone_axes(&t, it.rows());
    x.row_mut(1).fill(0.0);
    assert_eq!(layer_records(&it, x.view(), 0).unwrap().zero_frames, 1);
}

#[test]
fn distances_take_the_item_roles_into_account() {
    // d(A, X) puts A's frames on the rows; on exact up/left ties the path, and so the
    // distance, can differ from d(X, A). Frames are p = (1,0), q = (0,1), n = (-1,0), z = 0,
    // so frame distances are exactly 0, 1/2 or 1. Items a1 = p p q, a2 = n q p n, b = p n p,
    // all in context (x, x) of one speaker: two triplets, (A, X) = (a1, a2) and (a2, a1).
    // The definition (the DTW with its tie order, computed by brute force as in make_abx.py)
    // gives them a mean score of 1/4: error 0.75; with the roles swapped the mean would be
    // 1/2 (error 0.5).
    let t = table(&[("s1", "x a a a x b b b x a a a a x")]);
    let frames = "p p p q p p n p p n q p n p";
    let vec = |c: &str| match c {
        "p" => [1.0f32, 0.0],
        "q" => [0.0, 1.0],
        "n" => [-1.0, 0.0],
        _ => [0.0, 0.0],
    };
    let all: Vec<[f32; 2]> = frames.split_whitespace().map(vec).collect();
    let it = AbxItems::new(&t, "phone", 0, 0).unwrap();
    let x = Array2::from_shape_fn((it.rows().len(), 2), |(r, j)| all[it.rows()[r]][j]);
    let out = layer_records(&it, x.view(), 0).unwrap();
    assert_eq!(out.records.len(), 1);
    let r = &out.records[0];
    assert_eq!((r.n_pairs, r.n_triplets), (1, 2));
    assert_eq!(r.error_rate, 0.75);
}
