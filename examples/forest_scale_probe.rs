//! How far the plain quantile forest's own 80 % band is from the best band of its shape at the
//! nodes: the band's half-widths scaled about the forest's median by `s` (0.9 to 1.5), the
//! interval score (Gneiting & Raftery 2007) and coverage against the truth at every mapped node of
//! every step, averaged over the fields of a `calib_bench` folder. Shows whether any calibration
//! of the forest's distribution could beat it at the nodes (DEVELOPERS.md, "Why the interval score
//! stays behind the plain forest").
//!
//! ```text
//! cargo run --release --example calib_bench -- --seeds 1,2,3,4,5 --dir target/cb
//! cargo run --release --example forest_scale_probe -- target/cb 1,2,3,4,5
//! ```
use std::path::PathBuf;
use tidemark::metrics::interval_score_one;
use tidemark::pipeline::model::SavedModel;
use tidemark::pipeline::score::forest_band;
fn main() {
    let dir = PathBuf::from(std::env::args().nth(1).expect("a calib_bench folder"));
    let seeds: Vec<u64> = std::env::args()
        .nth(2)
        .expect("seeds, e.g. 1,2,3")
        .split(',')
        .map(|s| s.parse().expect("a seed"))
        .collect();
    let scales = [0.9, 1.0, 1.1, 1.2, 1.3, 1.5];
    for t in 0..3 {
        let mut tot = vec![0.0; scales.len()];
        let mut cov = vec![0.0; scales.len()];
        let mut name = String::new();
        for &seed in &seeds {
            let root = dir.join(format!("seed-{seed}"));
            let model = SavedModel::load(&root.join("results/model.json")).unwrap();
            let survey = tidemark::project::load_survey(&root.join("field/project.toml")).unwrap();
            name = model.calibrated[t].name.clone();
            let mut n = 0.0;
            let mut is = vec![0.0; scales.len()];
            let mut cv = vec![0.0; scales.len()];
            for (s, step) in survey.project.steps.iter().enumerate() {
                let b = forest_band(&model, &survey, t, s).unwrap();
                let truth = tidemark::io::read_map(
                    &root.join(format!("field/truth/{}/{}.tif", step.name, name)),
                    &survey.project.grid,
                    0.25,
                )
                .unwrap();
                for (k, &y) in truth.iter().enumerate() {
                    if !(y.is_finite() && b.mid[k].is_finite()) {
                        continue;
                    }
                    n += 1.0;
                    for (i, &c) in scales.iter().enumerate() {
                        let lo = b.mid[k] - c * (b.mid[k] - b.lo[k]);
                        let hi = b.mid[k] + c * (b.hi[k] - b.mid[k]);
                        is[i] += interval_score_one(y, lo, hi, 1.0 - model.level);
                        cv[i] += f64::from(u8::from(y >= lo && y <= hi));
                    }
                }
            }
            for i in 0..scales.len() {
                tot[i] += is[i] / n / seeds.len() as f64;
                cov[i] += cv[i] / n / seeds.len() as f64;
            }
        }
        let base = tot[1];
        print!("{name:4}");
        for i in 0..scales.len() {
            print!(
                "  s={:.1}: IS {:.4} ({:+.1} %) cov {:.3}",
                scales[i],
                tot[i],
                100.0 * (base - tot[i]) / base,
                cov[i]
            );
        }
        println!();
    }
}
