//! Well placement: producers and injectors at irregular positions, with rates and start times.
//!
//! Positions are drawn at random (not on nodes) and accepted by rules that mimic how fields are
//! developed: producers preferentially where the oil column is thick and porous (so that the wells
//! sample the field unevenly, as real wells do), injectors half near the oil-water contact
//! (peripheral injection) and half inside the oil leg, a minimum spacing between wells, no well on
//! the fault, and none in the porous lobe, which therefore lies away from every training point.
//! Optional observation wells neither produce nor inject: they are placed uniformly over the
//! field outside the lobe, so they sample the reservoir as a random grid node would.

use super::reservoir::Reservoir;
use super::settings::{SynthError, SynthSettings, sub_seed};
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use serde::{Deserialize, Serialize};

/// What a well does.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum WellKind {
    /// Produces reservoir fluids (pressure falls around it).
    Producer,
    /// Injects water (pressure rises, a water front grows).
    Injector,
    /// Observes only: no flow, measured from the base survey on.
    Observer,
}

impl WellKind {
    /// "producer" or "injector".
    pub fn as_str(&self) -> &'static str {
        match self {
            WellKind::Producer => "producer",
            WellKind::Injector => "injector",
            WellKind::Observer => "observer",
        }
    }
}

impl std::fmt::Display for WellKind {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// A well of the synthetic field.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct SynthWell {
    /// Well name, e.g. "SKB-P07".
    pub name: String,
    /// World x, m.
    pub x: f64,
    /// World y, m.
    pub y: f64,
    /// Producer or injector.
    pub kind: WellKind,
    /// Reservoir-condition rate, m3/day (always positive; the kind gives the sign).
    pub rate: f64,
    /// Start of production or injection, years after the base survey.
    pub start: f64,
}

/// A placed well in local coordinates, as the dynamics use it.
#[derive(Clone, Debug, PartialEq)]
pub struct PlacedWell {
    /// Well name.
    pub name: String,
    /// Producer or injector.
    pub kind: WellKind,
    /// Reservoir-condition rate, m3/day.
    pub rate: f64,
    /// Start, years after the base survey.
    pub start: f64,
    /// Local x, m.
    pub x: f64,
    /// Local y, m.
    pub y: f64,
    /// Pressure compartment.
    pub compartment: usize,
}

/// Splits `total` into integer quotas proportional to `weights`, at least `floor` each where the
/// weight is positive and the total allows.
fn quotas(total: usize, weights: &[f64], floor: usize) -> Vec<usize> {
    let sum: f64 = weights.iter().sum();
    let active = weights.iter().filter(|w| **w > 0.0).count();
    let mut q: Vec<usize> = weights
        .iter()
        .map(|w| {
            if sum > 0.0 {
                (total as f64 * w / sum).floor() as usize
            } else {
                0
            }
        })
        .collect();
    if total >= floor * active {
        for (qi, w) in q.iter_mut().zip(weights) {
            if *w > 0.0 && *qi < floor {
                *qi = floor;
            }
        }
    }
    // hand out or take back the remainder, largest weight first
    let mut order: Vec<usize> = (0..weights.len()).collect();
    order.sort_by(|a, b| weights[*b].total_cmp(&weights[*a]));
    let mut assigned: usize = q.iter().sum();
    let mut k = 0;
    while assigned < total && sum > 0.0 {
        q[order[k % order.len()]] += 1;
        assigned += 1;
        k += 1;
    }
    while assigned > total {
        let i = order[k % order.len()];
        if q[i] > floor {
            q[i] -= 1;
            assigned -= 1;
        }
        k += 1;
    }
    q
}

/// Every 4000th try shrinks the spacing between wells by 15 %; false once it has shrunk below
/// half a grid spacing (the wells do not fit).
fn relax_spacing(tries: usize, spacing: &mut f64, grid_spacing: f64) -> bool {
    if !tries.is_multiple_of(4000) {
        return true;
    }
    *spacing *= 0.85;
    *spacing >= 0.5 * grid_spacing
}

/// Whether a well may stand at local `(x, y)`: outside the lobe, `fault_clear` from the fault and
/// `spacing` from every well placed so far.
fn clear_spot(
    res: &Reservoir,
    placed: &[PlacedWell],
    x: f64,
    y: f64,
    spacing: f64,
    fault_clear: f64,
) -> bool {
    !res.no_well[res.nearest(x, y)]
        && res
            .fault
            .is_none_or(|f| f.signed_distance(x, y).abs() >= fault_clear)
        && !placed.iter().any(|p| (p.x - x).hypot(p.y - y) < spacing)
}

/// Places the wells of the field.
pub fn place(res: &Reservoir, s: &SynthSettings) -> Result<Vec<PlacedWell>, SynthError> {
    let mut rng = StdRng::seed_from_u64(sub_seed(s.seed, &[2]));
    let n = res.len();
    let width = (res.nx - 1) as f64 * res.spacing;
    let height = (res.ny - 1) as f64 * res.spacing;
    let margin = 2.0 * res.spacing;
    let oil_col = |i: usize| {
        (0..res.sands.len())
            .map(|k| res.oil_column(k, i))
            .sum::<f64>()
    };
    let quality = |i: usize| {
        (0..res.sands.len())
            .map(|k| res.oil_column(k, i) * res.sands[k].porosity[i])
            .sum::<f64>()
    };
    // reference quality: 90th percentile over the oil leg outside the lobe
    let mut q: Vec<f64> = (0..n)
        .filter(|&i| !res.no_well[i] && oil_col(i) > 0.0)
        .map(quality)
        .collect();
    if q.is_empty() {
        return Err(SynthError::Generation(
            "the oil leg outside the lobe is empty: raise oil_area_fraction or shrink the lobe"
                .into(),
        ));
    }
    q.sort_by(f64::total_cmp);
    let q_ref = q[((q.len() - 1) as f64 * 0.9) as usize].max(1e-9);

    let n_inj = if s.wells >= 2 {
        ((s.wells as f64 * s.injector_fraction).round() as usize)
            .clamp(usize::from(s.injector_fraction > 0.0), s.wells - 1)
    } else {
        0
    };
    let n_prod = s.wells - n_inj;
    let mut area = [0.0; 2];
    for i in 0..n {
        if !res.no_well[i] && oil_col(i) > 0.0 {
            area[res.compartment[i]] += 1.0;
        }
    }
    let prod_quota = quotas(n_prod, &area, 1);
    let inj_quota = quotas(n_inj, &area, 1);

    let t_end = s.steps as f64 * s.monitor_interval_years;
    let mut placed: Vec<PlacedWell> = Vec::with_capacity(s.wells);
    let mut spacing = s.min_well_spacing;
    let fault_clear = (150.0f64).max(2.0 * res.spacing);
    for c in 0..2 {
        for (kind, count) in [
            (WellKind::Producer, prod_quota[c]),
            (WellKind::Injector, inj_quota[c]),
        ] {
            for w in 0..count {
                let peripheral = kind == WellKind::Injector && w % 2 == 0;
                let mut tries = 0usize;
                loop {
                    tries += 1;
                    if !relax_spacing(tries, &mut spacing, res.spacing) {
                        return Err(SynthError::Generation(format!(
                            "cannot place {} wells on a {} x {} grid at {} m spacing; \
                             use fewer wells or a larger grid",
                            s.wells, res.nx, res.ny, res.spacing
                        )));
                    }
                    let x = rng.random_range(margin..(width - margin).max(margin + 1.0));
                    let y = rng.random_range(margin..(height - margin).max(margin + 1.0));
                    let u: f64 = rng.random();
                    let i = res.nearest(x, y);
                    if res.compartment_at(x, y) != c
                        || !clear_spot(res, &placed, x, y, spacing, fault_clear)
                    {
                        continue;
                    }
                    let ok = if peripheral {
                        let top = res.sands[0].top[i];
                        let owc = res.owc[c];
                        top > owc - 40.0 && top < owc + 15.0 && res.net_thickness(i) >= 3.0
                    } else {
                        oil_col(i) >= 3.0 && u < (quality(i) / q_ref).min(1.0)
                    };
                    if ok {
                        let (rate, start) = match kind {
                            WellKind::Producer => {
                                let rate =
                                    rng.random_range(s.producer_rate[0]..=s.producer_rate[1]);
                                let start = if rng.random::<f64>() < 0.65 {
                                    rng.random_range(0.0..=0.4)
                                } else {
                                    rng.random_range(0.4..=(0.55 * t_end).max(0.4))
                                };
                                (rate, start)
                            }
                            WellKind::Injector => (
                                rng.random_range(s.injector_rate[0]..=s.injector_rate[1]),
                                rng.random_range(0.25..=(0.5 * t_end).max(0.25)),
                            ),
                            WellKind::Observer => (0.0, 0.0),
                        };
                        placed.push(PlacedWell {
                            name: String::new(),
                            kind,
                            rate,
                            start,
                            x,
                            y,
                            compartment: c,
                        });
                        break;
                    }
                }
            }
        }
    }
    // Observation wells: anywhere outside the lobe and clear of the fault and the other wells,
    // drawn after the flowing wells so that those are the same with or without observers.
    for _ in 0..s.observers {
        let mut tries = 0usize;
        loop {
            tries += 1;
            if !relax_spacing(tries, &mut spacing, res.spacing) {
                return Err(SynthError::Generation(format!(
                    "cannot place {} observation wells besides {} wells on a {} x {} grid; \
                     use fewer wells or a larger grid",
                    s.observers, s.wells, res.nx, res.ny
                )));
            }
            let x = rng.random_range(margin..(width - margin).max(margin + 1.0));
            let y = rng.random_range(margin..(height - margin).max(margin + 1.0));
            if !clear_spot(res, &placed, x, y, spacing, fault_clear) {
                continue;
            }
            placed.push(PlacedWell {
                name: String::new(),
                kind: WellKind::Observer,
                rate: 0.0,
                start: 0.0,
                x,
                y,
                compartment: res.compartment_at(x, y),
            });
            break;
        }
    }
    // names in order of start within each kind
    for kind in [WellKind::Producer, WellKind::Injector, WellKind::Observer] {
        let mut idx: Vec<usize> = (0..placed.len())
            .filter(|&i| placed[i].kind == kind)
            .collect();
        idx.sort_by(|a, b| placed[*a].start.total_cmp(&placed[*b].start));
        let letter = match kind {
            WellKind::Producer => 'P',
            WellKind::Injector => 'I',
            WellKind::Observer => 'O',
        };
        for (k, i) in idx.into_iter().enumerate() {
            placed[i].name = format!("SKB-{letter}{:02}", k + 1);
        }
    }
    placed.sort_by(|a, b| a.name.cmp(&b.name));
    Ok(placed)
}

#[cfg(test)]
mod tests {
    use super::quotas;

    #[test]
    fn quotas_add_up() {
        assert_eq!(quotas(10, &[3.0, 1.0], 1).iter().sum::<usize>(), 10);
        assert_eq!(quotas(10, &[1.0, 0.0], 1), vec![10, 0]);
        let q = quotas(3, &[10.0, 0.1], 1);
        assert_eq!(q.iter().sum::<usize>(), 3);
        assert!(q[1] >= 1);
    }
}
