//! ABX items: maximal runs of one label value inside an utterance, their contexts, the
//! (label, context, speaker) cells they fall in, the seeded per-cell sample, and the item
//! pairs whose distances the triplets need.

use std::collections::{BTreeMap, BTreeSet};

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

use crate::capture::{FrameTable, UNLABELLED};

use super::AbxError;

/// Context code of an utterance edge (`#`).
pub const EDGE: u32 = u32::MAX;

/// One item: a run of frames with one label value.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Item {
    /// Utterance index.
    pub utterance: u32,
    /// Speaker index.
    pub speaker: u32,
    /// Label code.
    pub label: u32,
    /// Label code of the previous item of the utterance ([`EDGE`] at the start).
    pub prev: u32,
    /// Label code of the next item of the utterance ([`EDGE`] at the end).
    pub next: u32,
    /// Capture frame indices of the item, in time order.
    pub frames: Vec<usize>,
}

/// Labels and speakers of a scored cell: A and B carry labels a and b and come from speaker
/// s; X carries label a and comes from speaker t (t = s within speaker).
#[derive(Clone, Copy, Debug)]
pub(crate) struct CellPair {
    pub a: u32,
    pub b: u32,
    pub s: u32,
    pub t: u32,
}

/// (label, previous, next, speaker).
pub(crate) type CellKey = (u32, u32, u32, u32);

/// The items of one label column, sampled per cell, with what the triplets need.
#[derive(Clone, Debug)]
pub struct AbxItems {
    /// Label column.
    pub label: String,
    /// Class names of the label column, by code.
    pub classes: Vec<String>,
    /// Items found before sampling.
    pub n_found: usize,
    /// Cells holding more than `max_items` items (sampled down).
    pub n_capped_cells: usize,
    /// Kept items, in order of utterance and time.
    pub items: Vec<Item>,
    /// Start of each kept item's rows in [`AbxItems::rows`] (and one past the end).
    pub(crate) offsets: Vec<usize>,
    rows: Vec<usize>,
    /// Kept item indices per cell.
    pub(crate) cells: BTreeMap<CellKey, Vec<u32>>,
    /// Labels present per (previous, next, speaker).
    pub(crate) labels_at: BTreeMap<(u32, u32, u32), Vec<u32>>,
    /// Speakers present per (label, previous, next).
    pub(crate) speakers_at: BTreeMap<(u32, u32, u32), Vec<u32>>,
    /// Unordered item pairs (i < j) whose distances the triplets use, sorted.
    pub(crate) pairs: Vec<(u32, u32)>,
    /// Within-speaker triplets.
    pub n_within: u64,
    /// Across-speaker triplets.
    pub n_across: u64,
}

impl AbxItems {
    /// Items of the label column `label` of `table`: every maximal run of frames with one
    /// label value inside an utterance (frames in order of their position; an unlabelled frame
    /// ends a run and belongs to no item). `max_items` > 0 keeps at most that many items per
    /// (label, context, speaker) cell, drawn with a ChaCha8 generator seeded by `seed`, cells
    /// in order of their codes; 0 keeps all.
    pub fn new(
        table: &FrameTable,
        label: &str,
        max_items: usize,
        seed: u64,
    ) -> Result<AbxItems, AbxError> {
        let task = table.task(label).ok_or_else(|| AbxError::UnknownLabel {
            label: label.to_string(),
            columns: table.task_names().join(", "),
        })?;
        let n = table.n_frames();
        let mut order: Vec<usize> = (0..n).collect();
        order.sort_by_key(|&f| (table.frame_utt[f], table.frame_pos[f]));
        // runs
        let mut all: Vec<Item> = Vec::new();
        let mut utt_first = 0usize; // first item of the current utterance
        let mut last: Option<(u32, u32)> = None; // (utterance, code) of the previous frame
        for &f in &order {
            let (u, code) = (table.frame_utt[f], task.codes[f]);
            if last.map(|(lu, _)| lu) != Some(u) {
                close_utterance(&mut all[utt_first..]);
                utt_first = all.len();
            }
            if code != UNLABELLED {
                if last == Some((u, code)) {
                    all.last_mut().expect("open run").frames.push(f);
                } else {
                    all.push(Item {
                        utterance: u,
                        speaker: table.utt_speaker[u as usize],
                        label: code,
                        prev: EDGE,
                        next: EDGE,
                        frames: vec![f],
                    });
                }
            }
            last = Some((u, code));
        }
        close_utterance(&mut all[utt_first..]);
        let n_found = all.len();

        // cells and the seeded sample
        let mut cells: BTreeMap<CellKey, Vec<u32>> = BTreeMap::new();
        for (i, it) in all.iter().enumerate() {
            cells.entry(key(it)).or_default().push(i as u32);
        }
        let mut keep = vec![max_items == 0; all.len()];
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let mut n_capped_cells = 0;
        if max_items > 0 {
            for members in cells.values() {
                if members.len() > max_items {
                    n_capped_cells += 1;
                    for k in rand::seq::index::sample(&mut rng, members.len(), max_items) {
                        keep[members[k] as usize] = true;
                    }
                } else {
                    members.iter().for_each(|&i| keep[i as usize] = true);
                }
            }
        }
        let items: Vec<Item> = all
            .into_iter()
            .zip(&keep)
            .filter(|(_, &k)| k)
            .map(|(it, _)| it)
            .collect();
        let mut offsets = Vec::with_capacity(items.len() + 1);
        let mut rows = Vec::new();
        for it in &items {
            offsets.push(rows.len());
            rows.extend_from_slice(&it.frames);
        }
        offsets.push(rows.len());
        let mut out = AbxItems {
            label: label.to_string(),
            classes: task.classes.clone(),
            n_found,
            n_capped_cells,
            items,
            offsets,
            rows,
            cells: BTreeMap::new(),
            labels_at: BTreeMap::new(),
            speakers_at: BTreeMap::new(),
            pairs: vec![],
            n_within: 0,
            n_across: 0,
        };
        out.index();
        Ok(out)
    }

    /// Capture frames the kept items use, item after item: the rows a layer matrix given to
    /// [`super::layer_records`] must hold, in this order.
    pub fn rows(&self) -> &[usize] {
        &self.rows
    }

    /// Speakers with at least one kept item.
    pub fn n_speakers(&self) -> usize {
        self.items
            .iter()
            .map(|i| i.speaker)
            .collect::<BTreeSet<_>>()
            .len()
    }

    /// Label values with at least one kept item.
    pub fn n_labels(&self) -> usize {
        self.items
            .iter()
            .map(|i| i.label)
            .collect::<BTreeSet<_>>()
            .len()
    }

    /// Item pairs whose DTW distance each layer computes.
    pub fn n_item_pairs(&self) -> usize {
        self.pairs.len()
    }

    /// Cells, who is present where, the triplet counts and the item pairs needed.
    fn index(&mut self) {
        for (i, it) in self.items.iter().enumerate() {
            self.cells.entry(key(it)).or_default().push(i as u32);
        }
        for &(a, p, q, s) in self.cells.keys() {
            self.labels_at.entry((p, q, s)).or_default().push(a);
            self.speakers_at.entry((a, p, q)).or_default().push(s);
        }
        let mut pairs = BTreeSet::new();
        let mut add = |x: u32, y: u32| {
            pairs.insert((x.min(y), x.max(y)));
        };
        let (mut n_within, mut n_across) = (0u64, 0u64);
        self.for_each_cell_pair(|_, cell_a, cell_b, cross| match cross {
            None => {
                n_within += (cell_a.len() * (cell_a.len() - 1) * cell_b.len()) as u64;
                for &x in cell_a {
                    for &y in cell_a.iter().chain(cell_b) {
                        if x != y {
                            add(x, y);
                        }
                    }
                }
            }
            Some(cell_x) => {
                n_across += (cell_a.len() * cell_b.len() * cell_x.len()) as u64;
                for &x in cell_x {
                    for &y in cell_a.iter().chain(cell_b) {
                        add(x, y);
                    }
                }
            }
        });
        self.pairs = pairs.into_iter().collect();
        self.n_within = n_within;
        self.n_across = n_across;
    }

    /// Every scored cell, in a fixed order: `f(key, A cell, B cell, None)` for each
    /// within-speaker cell (a, b, context, speaker s) whose A cell holds two items, and
    /// `f(key, A cell, B cell, Some(X cell))` for each across-speaker cell (a, b, context, s,
    /// t), X from speaker t.
    pub(crate) fn for_each_cell_pair(
        &self,
        mut f: impl FnMut(&CellPair, &[u32], &[u32], Option<&[u32]>),
    ) {
        for (&(a, p, q, s), cell_a) in &self.cells {
            for &b in &self.labels_at[&(p, q, s)] {
                if b == a {
                    continue;
                }
                let cell_b = &self.cells[&(b, p, q, s)];
                let mut key = CellPair { a, b, s, t: s };
                if cell_a.len() >= 2 {
                    f(&key, cell_a, cell_b, None);
                }
                for &t in &self.speakers_at[&(a, p, q)] {
                    if t != s {
                        key.t = t;
                        f(&key, cell_a, cell_b, Some(&self.cells[&(a, p, q, t)]));
                    }
                }
            }
        }
    }
}

fn key(it: &Item) -> CellKey {
    (it.label, it.prev, it.next, it.speaker)
}

/// Set the contexts of one utterance's items (adjacent items of its list; `#` at the edges).
fn close_utterance(items: &mut [Item]) {
    for k in 0..items.len() {
        items[k].prev = if k > 0 { items[k - 1].label } else { EDGE };
        items[k].next = items.get(k + 1).map_or(EDGE, |n| n.label);
    }
}
