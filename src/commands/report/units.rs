//! The work of a report as units that run independently: (capture, layer) for the probe and
//! ABX, one whole capture for its map (the map's layers chain their starting points), and
//! for two captures one unit per layer of the first for its row of the CKA matrix and one
//! for the rest of the comparison (the pairing, and the probe deltas where the frames are
//! not paired in order: otherwise the assembly pairs the probe units' own predictions). Each unit computes records and returns them as a [`Part`];
//! nothing is written. `report` runs every unit in-process; `voxstrata unit` runs one and
//! writes its part as JSON; `assemble` reads the parts back. Parts pass through the same
//! JSON in both cases ([`Part::encode`] and [`Part::decode`]), so the files written from them
//! are the same bytes.

use ndarray::Array2;
use serde::{Deserialize, Serialize};

use super::ReportOptions;
use crate::analysis::abx::AbxError;
use crate::analysis::compare::{self, CkaRow};
use crate::analysis::layerwise::{self, AbxLayer};
use crate::capture::{Capture, LayerSelection};
use crate::records::compare::{CkaRecord, CompareReport, Estimator, Kernel, Pairing, ProbeDelta};
use crate::records::map::{LayerMap, MapReport, PurityRecord, SampleLabels, Summary};
use crate::records::probe::ProbeReport;
use crate::records::CaptureRef;
use crate::{CommonOptions, Progress};

/// One independent piece of a report's work. `capture` indexes the run's captures; `layer` is
/// a layer number.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Unit {
    /// Probe every task on one layer of one capture.
    Probe {
        /// Capture index.
        capture: usize,
        /// Layer number.
        layer: usize,
    },
    /// ABX error rates of one layer of one capture.
    Abx {
        /// Capture index.
        capture: usize,
        /// Layer number.
        layer: usize,
    },
    /// Maps and purity of every layer of one capture.
    Map {
        /// Capture index.
        capture: usize,
    },
    /// One row of the CKA matrix: a layer of the first capture against every layer of the
    /// second.
    CkaRow {
        /// Layer number in the first capture.
        layer: usize,
    },
    /// The rest of the comparison of the two captures: the pairing and the probe deltas.
    Compare,
}

impl Unit {
    /// A short description naming the capture, e.g. `probe of early, layer 3`.
    pub fn describe(&self, names: &[String]) -> String {
        let name = |c: &usize| names.get(*c).map(String::as_str).unwrap_or("?").to_string();
        match self {
            Unit::Probe { capture, layer } => format!("probe of {}, layer {layer}", name(capture)),
            Unit::Abx { capture, layer } => format!("ABX of {}, layer {layer}", name(capture)),
            Unit::Map { capture } => format!("map of {}", name(capture)),
            Unit::CkaRow { layer } => {
                format!("CKA of {}, layer {layer}, against {}", name(&0), name(&1))
            }
            Unit::Compare => {
                "comparison (pairing; probe deltas unless paired at assembly)".to_string()
            }
        }
    }
}

/// Every unit of a report on `caps` with `opts`, in the order the report writes them: per
/// capture its probe layers, its map and its ABX layers, then the comparison's CKA rows (one
/// per layer of the first capture) and the rest of the comparison.
pub fn plan(
    caps: &[Capture],
    opts: &ReportOptions,
    common: &CommonOptions,
) -> crate::Result<Vec<Unit>> {
    let mut units = Vec::new();
    let mut first_ids = Vec::new();
    for (ci, c) in caps.iter().enumerate() {
        let ids: Vec<usize> = c
            .select_layers(common.layers.as_ref())?
            .into_iter()
            .map(|i| c.layers[i].id)
            .collect();
        if ci == 0 {
            first_ids = ids.clone();
        }
        units.extend(ids.iter().map(|&layer| Unit::Probe { capture: ci, layer }));
        units.push(Unit::Map { capture: ci });
        if opts.abx.is_some() {
            units.extend(ids.iter().map(|&layer| Unit::Abx { capture: ci, layer }));
        }
    }
    if caps.len() == 2 {
        units.extend(first_ids.iter().map(|&layer| Unit::CkaRow { layer }));
        units.push(Unit::Compare);
    }
    Ok(units)
}

/// What a unit computed.
#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Part {
    /// One layer's probe report.
    Probe(ProbePart),
    /// One layer's ABX results.
    Abx(AbxLayer),
    /// ABX could not be computed on this capture (no triplet, unknown label): the reason.
    AbxNotComputed {
        /// Why.
        reason: String,
    },
    /// A capture's maps.
    Map(MapPart),
    /// One row of the CKA matrix.
    CkaRow(CkaRow),
    /// The comparison without its CKA matrix.
    Compare(ComparePart),
}

impl Part {
    /// The part as JSON bytes.
    pub fn encode(&self) -> crate::Result<Vec<u8>> {
        serde_json::to_vec(self).map_err(|e| crate::Error::Internal(format!("encoding part: {e}")))
    }

    /// A part from JSON bytes.
    pub fn decode(bytes: &[u8]) -> Result<Part, serde_json::Error> {
        serde_json::from_slice(bytes)
    }
}

/// Run one unit on the opened captures. With two captures, its progress lines start with the
/// capture's name (the comparison's with both).
pub fn run(
    unit: &Unit,
    caps: &[Capture],
    opts: &ReportOptions,
    common: &CommonOptions,
    progress: &Progress,
) -> crate::Result<Part> {
    let named;
    let progress = match (caps, unit) {
        ([a, b], Unit::Compare | Unit::CkaRow { .. }) => {
            named = progress.with_prefix(&format!("{} against {}", a.name, b.name));
            &named
        }
        (
            [_, _],
            Unit::Probe { capture, .. } | Unit::Abx { capture, .. } | Unit::Map { capture },
        ) => {
            named = progress.with_prefix(caps.get(*capture).map_or("?", |c| c.name.as_str()));
            &named
        }
        _ => progress,
    };
    let cap = |ci: &usize| {
        caps.get(*ci)
            .ok_or_else(|| crate::Error::Internal(format!("unit names capture {ci}")))
    };
    match unit {
        Unit::Probe { capture, layer } => {
            let one = one_layer(common, *layer);
            let mut r = crate::analysis::probe::run(cap(capture)?, &opts.probe, &one, progress)?;
            // A comparison's probe deltas are paired from these predictions at assembly. A
            // batch unit opens only its own capture, so whether the run has two is not known
            // here: they are kept whenever probe deltas are asked for.
            let predictions = if opts.compare.probe {
                std::mem::take(&mut r.predictions)
            } else {
                Vec::new()
            };
            Ok(Part::Probe(ProbePart {
                report: r,
                predictions,
            }))
        }
        Unit::Abx { capture, layer } => {
            let c = cap(capture)?;
            let Some(a) = &opts.abx else {
                return Err(crate::Error::Internal(
                    "ABX unit without ABX options".into(),
                ));
            };
            let li = c.select_layers(Some(&LayerSelection(vec![*layer])))?[0];
            match layerwise::abx_layer(c, a, common.seed, li) {
                Ok(r) => Ok(Part::Abx(r)),
                Err(e @ (AbxError::NoTriplet { .. } | AbxError::UnknownLabel { .. })) => {
                    Ok(Part::AbxNotComputed {
                        reason: format!("not computed: {e}"),
                    })
                }
                Err(e) => Err(e.into()),
            }
        }
        Unit::Map { capture } => {
            let r = crate::analysis::map::run(cap(capture)?, &opts.map, common, progress)?;
            Ok(Part::Map(MapPart::from(r)))
        }
        Unit::CkaRow { layer } => {
            let [a, b] = caps else {
                return Err(crate::Error::Internal(
                    "CKA row without two captures".into(),
                ));
            };
            let r = compare::cka_row(a, b, &opts.compare, common, *layer, progress)?;
            Ok(Part::CkaRow(r))
        }
        Unit::Compare => {
            let [a, b] = caps else {
                return Err(crate::Error::Internal(
                    "comparison without two captures".into(),
                ));
            };
            let deferred = compare::DeltaSource::Deferred;
            let r = compare::run_without_cka(a, b, &opts.compare, common, progress, deferred)?;
            Ok(Part::Compare(ComparePart::from(r)))
        }
    }
}

fn one_layer(common: &CommonOptions, layer: usize) -> CommonOptions {
    CommonOptions {
        layers: Some(LayerSelection(vec![layer])),
        ..common.clone()
    }
}

/// One layer's probe report with the pooled test predictions behind its records (which the
/// report's own JSON leaves out): with two captures, the comparison pairs them at assembly
/// instead of fitting the same probes again. Empty when no probe deltas are asked for.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct ProbePart {
    report: ProbeReport,
    predictions: Vec<crate::records::probe::TaskPredictions>,
}

impl ProbePart {
    /// The report, its predictions restored.
    pub fn into_report(self) -> ProbeReport {
        ProbeReport {
            predictions: self.predictions,
            ..self.report
        }
    }
}

/// A [`MapReport`] in serialisable form (the maps as rows of points).
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct MapPart {
    capture: CaptureRef,
    frames: Vec<u64>,
    layers: Vec<LayerMap>,
    embeddings: Vec<Vec<[f32; 2]>>,
    labels: Vec<SampleLabels>,
    records: Vec<PurityRecord>,
    summary: Summary,
    notes: Vec<String>,
    options: serde_json::Value,
    colourings: Vec<String>,
}

impl From<MapReport> for MapPart {
    fn from(r: MapReport) -> Self {
        let embeddings = r
            .layers
            .iter()
            .map(|l| l.embedding.outer_iter().map(|p| [p[0], p[1]]).collect())
            .collect();
        MapPart {
            capture: r.capture,
            frames: r.frames,
            layers: r.layers,
            embeddings,
            labels: r.labels,
            records: r.records,
            summary: r.summary,
            notes: r.notes,
            options: r.options,
            colourings: r.colourings,
        }
    }
}

impl MapPart {
    /// The report back, maps included.
    pub fn into_report(self) -> crate::Result<MapReport> {
        let mut layers = self.layers;
        for (l, e) in layers.iter_mut().zip(self.embeddings) {
            let flat: Vec<f32> = e.iter().flatten().copied().collect();
            l.embedding = Array2::from_shape_vec((e.len(), 2), flat)
                .map_err(|err| crate::Error::Internal(format!("map part: {err}")))?;
        }
        Ok(MapReport {
            capture: self.capture,
            frames: self.frames,
            layers,
            labels: self.labels,
            records: self.records,
            summary: self.summary,
            notes: self.notes,
            options: self.options,
            colourings: self.colourings,
        })
    }
}

/// A [`CompareReport`] in serialisable form (the pairs' rows, which nothing writes, left out;
/// `cka` empty in a [`Unit::Compare`] part, filled from the [`Unit::CkaRow`] parts).
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct ComparePart {
    captures: Vec<CaptureRef>,
    layers_a: Vec<usize>,
    layers_b: Vec<usize>,
    pairing: Pairing,
    cka: Vec<CkaRecord>,
    probe_delta: Vec<ProbeDelta>,
    notes: Vec<String>,
    options: serde_json::Value,
    kernel: Kernel,
    estimator: Estimator,
    /// The probe deltas are to be paired from the probe parts at assembly.
    deltas_deferred: bool,
}

impl From<CompareReport> for ComparePart {
    fn from(r: CompareReport) -> Self {
        ComparePart {
            captures: r.captures,
            layers_a: r.layers_a,
            layers_b: r.layers_b,
            pairing: r.pairing,
            cka: r.cka,
            probe_delta: r.probe_delta,
            notes: r.notes,
            options: r.options,
            kernel: r.kernel,
            estimator: r.estimator,
            deltas_deferred: r.deltas_deferred,
        }
    }
}

impl From<ComparePart> for CompareReport {
    fn from(p: ComparePart) -> Self {
        CompareReport {
            captures: p.captures,
            layers_a: p.layers_a,
            layers_b: p.layers_b,
            pairing: p.pairing,
            cka: p.cka,
            probe_delta: p.probe_delta,
            notes: p.notes,
            options: p.options,
            kernel: p.kernel,
            estimator: p.estimator,
            deltas_deferred: p.deltas_deferred,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_part_without_abx_survives_its_json() {
        // Internally tagged enums refuse newtype strings at run time, not at compile time.
        let p = Part::AbxNotComputed {
            reason: "not computed: no triplet".into(),
        };
        match Part::decode(&p.encode().unwrap()).unwrap() {
            Part::AbxNotComputed { reason } => assert_eq!(reason, "not computed: no triplet"),
            other => panic!("{other:?}"),
        }
    }
}
