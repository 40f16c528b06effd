//! The IRB risk-weight function for other retail exposures against the published illustrative table.
//!
//! Source of every expected value: Basel Committee on Banking Supervision, "International Convergence
//! of Capital Measurement and Capital Standards: A Revised Framework", June 2006, Annex 5, table of
//! illustrative IRB risk weights for UL, other retail exposures, without the 1.06 scaling factor; the
//! rows are copied with that source line into tests/data/basel_annex5_other_retail.csv.

use loancycle::analytic::basel;
use loancycle::analytic::tolerance::BASEL_RISK_WEIGHT_PP;

struct Row {
    pd_percent: f64,
    lgd45_percent: f64,
    lgd85_percent: f64,
}

fn published_rows() -> Vec<Row> {
    let text = include_str!("data/basel_annex5_other_retail.csv");
    let mut lines = text.lines().filter(|l| !l.starts_with('#') && !l.trim().is_empty());
    assert_eq!(
        lines.next(),
        Some("pd_percent,risk_weight_lgd45_percent,risk_weight_lgd85_percent")
    );
    lines
        .map(|l| {
            let v: Vec<f64> = l.split(',').map(|c| c.trim().parse().unwrap()).collect();
            assert_eq!(v.len(), 3, "{l}");
            Row {
                pd_percent: v[0],
                lgd45_percent: v[1],
                lgd85_percent: v[2],
            }
        })
        .collect()
}

#[test]
fn every_published_row_at_lgd_45_and_85_per_cent() {
    let rows = published_rows();
    assert_eq!(rows.len(), 12, "the Annex 5 other-retail table has 12 PD rows");
    for row in &rows {
        let pd = row.pd_percent / 100.0;
        for (lgd, published) in [(0.45, row.lgd45_percent), (0.85, row.lgd85_percent)] {
            // Published value: Basel II framework (June 2006), Annex 5, other retail exposures.
            let ours = 100.0 * basel::risk_weight(pd, lgd).unwrap();
            assert!(
                (ours - published).abs() <= BASEL_RISK_WEIGHT_PP,
                "PD {}%, LGD {}%: ours {ours:.4}%, published {published}%",
                row.pd_percent,
                lgd * 100.0
            );
        }
    }
}

/// The capital requirement and the 99.9% conditional hit probability behind each published risk
/// weight. The framework defines RWA = 12.5 K (para 329) and K = LGD (conditional probability - PD)
/// (para 328), so each published weight fixes K and the conditional probability; the tolerance is the
/// published weight's rounding carried through those two relations.
#[test]
fn capital_and_conditional_probability_behind_every_published_row() {
    for row in published_rows() {
        let pd = row.pd_percent / 100.0;
        for (lgd, published_percent) in [(0.45, row.lgd45_percent), (0.85, row.lgd85_percent)] {
            // Published value: Basel II framework (June 2006), Annex 5, other retail exposures.
            let published_k = published_percent / 100.0 / 12.5;
            let k_tolerance = BASEL_RISK_WEIGHT_PP / 100.0 / 12.5;
            let k = basel::capital_requirement(pd, lgd).unwrap();
            assert!(
                (k - published_k).abs() <= k_tolerance,
                "PD {}%, LGD {lgd}: K {k}, published {published_k}",
                row.pd_percent
            );
            let published_conditional = published_k / lgd + pd;
            let conditional = basel::conditional_hit_probability(pd).unwrap();
            assert!(
                (conditional - published_conditional).abs() <= k_tolerance / lgd,
                "PD {}%, LGD {lgd}: conditional {conditional}, published {published_conditional}",
                row.pd_percent
            );
        }
    }
}
