//! Times the pieces of node prediction on a saved model (development probe).
use std::time::Instant;
use tidemark::pipeline::model::SavedModel;
fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let model = SavedModel::load(std::path::Path::new(&args[0])).unwrap();
    let survey = tidemark::project::load_survey(std::path::Path::new(&args[1])).unwrap();
    let wide = model.node_features(&survey, 0);
    for (t, cal) in model.calibrated.iter().enumerate() {
        // Each target reads its own columns (its smoothing width's block and the step).
        let x = model.target_table(wide.view(), t);
        let depth: f64 = cal
            .forest
            .trees()
            .iter()
            .map(|t| t.depth() as f64)
            .sum::<f64>()
            / cal.forest.n_trees() as f64;
        let leaves: f64 = cal
            .forest
            .trees()
            .iter()
            .map(|t| t.n_leaves() as f64)
            .sum::<f64>()
            / cal.forest.n_trees() as f64;
        let t = Instant::now();
        let _ = cal.forest.predict(x.view());
        let t_mean = t.elapsed().as_secs_f64();
        let t = Instant::now();
        let _ = cal
            .forest
            .predict_with_distribution(x.view(), 0, &[0.1, 0.5, 0.9], &[0.1]);
        let t_dist = t.elapsed().as_secs_f64();
        let t = Instant::now();
        let nb = cal.booster.as_ref().map(|b| {
            let _ = b.predict(x.view());
            b.trees().len()
        });
        let t_boost = t.elapsed().as_secs_f64();
        let t = Instant::now();
        let _ = cal.predict(x.view()).unwrap();
        let t_all = t.elapsed().as_secs_f64();
        println!(
            "{}: forest {} trees depth {depth:.1} leaves {leaves:.1}: mean {t_mean:.2} s, dist {t_dist:.2} s; booster {nb:?} trees {t_boost:.2} s (weight {}); calibrated predict {t_all:.2} s",
            cal.name,
            cal.forest.n_trees(),
            cal.forest_weight
        );
    }
    let t = Instant::now();
    let plain = wide.select(ndarray::Axis(1), &model.columns(None));
    let _ = model.applicability.assess(plain.view());
    println!("applicability {:.2} s", t.elapsed().as_secs_f64());
}
