//! Records of the ABX discriminability analysis (`src/analysis/abx/`).

use serde::{Deserialize, Serialize};

/// One layer's phone ABX error rate in one condition.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct AbxRecord {
    /// Layer number (as in the capture's file names).
    pub layer: usize,
    /// Label column the items are runs of (`phone` by default).
    pub label: String,
    /// `within` (A, B and X from one speaker) or `across` (X from another speaker).
    pub condition: String,
    /// 1 − the averaged ABX score (0: perfect discrimination, 0.5: chance).
    pub error_rate: f64,
    /// Ordered label pairs (a, b) that contributed at least one triplet.
    pub n_pairs: usize,
    /// Triplets scored.
    pub n_triplets: u64,
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn record_round_trips_through_json() {
        let r = AbxRecord {
            layer: 3,
            label: "phone".into(),
            condition: "across".into(),
            error_rate: 0.125,
            n_pairs: 12,
            n_triplets: 4096,
        };
        let text = serde_json::to_string(&r).unwrap();
        assert_eq!(
            text,
            r#"{"layer":3,"label":"phone","condition":"across","error_rate":0.125,"n_pairs":12,"n_triplets":4096}"#
        );
        assert_eq!(serde_json::from_str::<AbxRecord>(&text).unwrap(), r);
    }
}
