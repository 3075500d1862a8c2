//! The static reservoir: structure, stacked sands, rock maps, the sealing fault and the lobe without
//! wells.
//!
//! Geometry is built in local metres (node (i, j) at (i spacing, j spacing)); the project writer
//! places it in world coordinates. Thickness, porosity, clay and heterogeneity maps are seeded
//! Gaussian random fields ([`super::spectral::gaussian_field`]); thickness is centred near the
//! tuning thickness of the wavelet so that the sands come in and out of tuning. The structure is an
//! elongated dome on a regional dip, roughened by a random field; the optional fault shifts the
//! structure by its throw and separates two pressure compartments with their own oil-water contact.
//! A thick, porous lobe in one corner of the oil leg is kept free of wells and has its own aquifer
//! (see [`super::dynamics::lobe_sweep`]), so that predictions there are made away from the training
//! data. Optionally a second well-free region, a small culmination elsewhere on the structure, is
//! drained from beyond the survey ([`GasCap`]; its dynamics in [`super::dynamics`]).
//!
//! Both regions are written as masks beside the truth ([`Reservoir::masks`]): 1 where the region's
//! weight is at least one half (within its radius), 0 elsewhere.

pub use super::settings::WELL_FREE_MARGIN;
use super::settings::{SynthSettings, sub_seed};
use super::spectral::gaussian_field;
use rand::SeedableRng;
use rand::rngs::StdRng;

/// One sand of the stack, as maps over the grid nodes.
#[derive(Clone, Debug)]
pub struct Sand {
    /// Depth of the sand top, m (true vertical depth below datum, positive down).
    pub top: Vec<f64>,
    /// Net sand thickness, m (0 where the sand pinches out).
    pub thickness: Vec<f64>,
    /// Porosity, fraction.
    pub porosity: Vec<f64>,
    /// Clay volume fraction of the mineral.
    pub vclay: Vec<f64>,
    /// Irreducible (initial) water saturation in the oil leg.
    pub swi: Vec<f64>,
    /// Multiplier of flow distance (> 1 where the sand is more permeable); shapes water fronts.
    pub flow: Vec<f64>,
}

/// A planar sealing fault in local coordinates.
#[derive(Clone, Copy, Debug)]
pub struct Fault {
    /// A point on the fault trace, local metres.
    pub point: (f64, f64),
    /// Unit normal pointing into compartment 1.
    pub normal: (f64, f64),
    /// Vertical throw, m (compartment 1 is down-thrown).
    pub throw: f64,
}

impl Fault {
    /// Signed distance (m) of a local point from the fault trace, positive in compartment 1.
    pub fn signed_distance(&self, x: f64, y: f64) -> f64 {
        (x - self.point.0) * self.normal.0 + (y - self.point.1) * self.normal.1
    }

    /// Compartment (0 or 1) of a local point.
    pub fn compartment(&self, x: f64, y: f64) -> usize {
        usize::from(self.signed_distance(x, y) > 0.0)
    }

    /// Mirror image of a local point across the fault trace.
    pub fn mirror(&self, x: f64, y: f64) -> (f64, f64) {
        let d = self.signed_distance(x, y);
        (x - 2.0 * d * self.normal.0, y - 2.0 * d * self.normal.1)
    }
}

/// Weight (0..1) of a round region with a smooth edge at normalised distance `d` (distance from
/// the centre over the radius): one half on the rim.
pub fn region_weight(d: f64) -> f64 {
    1.0 / (1.0 + ((d - 1.0) / 0.12).exp())
}

/// The sealed culmination drained from beyond the survey (setting `gas_cap`).
#[derive(Clone, Debug)]
pub struct GasCap {
    /// Weight (0..1) of the culmination at each node.
    pub weight: Vec<f64>,
    /// Centre, local m.
    pub centre: (f64, f64),
    /// Radius, m.
    pub radius: f64,
}

/// The static model.
#[derive(Clone, Debug)]
pub struct Reservoir {
    /// Nodes along x.
    pub nx: usize,
    /// Nodes along y.
    pub ny: usize,
    /// Node spacing, m.
    pub spacing: f64,
    /// The sands, shallowest first.
    pub sands: Vec<Sand>,
    /// Shale between consecutive sands (empty with one sand), thickness m.
    pub interbed: Vec<Vec<f64>>,
    /// Compartment of every node (all 0 without a fault).
    pub compartment: Vec<usize>,
    /// The fault, if any.
    pub fault: Option<Fault>,
    /// Oil-water contact depth of each compartment, m.
    pub owc: [f64; 2],
    /// Weight (0..1) of the porous lobe at each node.
    pub lobe: Vec<f64>,
    /// Centre of the lobe, local m.
    pub lobe_centre: (f64, f64),
    /// Radius of the lobe, m.
    pub lobe_radius: f64,
    /// Crest of the dome, local m.
    pub crest: (f64, f64),
    /// The drained culmination, when the field has one.
    pub gas_cap: Option<GasCap>,
    /// Nodes where no well may be placed (the lobe, the culmination and a margin around each).
    pub no_well: Vec<bool>,
    /// P-wave velocity of the cap shale above the reservoir, m/s.
    pub shale_vp: Vec<f64>,
}

impl Reservoir {
    /// Number of nodes.
    pub fn len(&self) -> usize {
        self.nx * self.ny
    }

    /// True for a grid without nodes (never built by the generator).
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Local coordinates (m) of a node index.
    pub fn node_local(&self, n: usize) -> (f64, f64) {
        (
            (n % self.nx) as f64 * self.spacing,
            (n / self.nx) as f64 * self.spacing,
        )
    }

    /// Index of the node nearest to a local point (clamped to the grid).
    pub fn nearest(&self, x: f64, y: f64) -> usize {
        let i = (x / self.spacing).round().clamp(0.0, (self.nx - 1) as f64) as usize;
        let j = (y / self.spacing).round().clamp(0.0, (self.ny - 1) as f64) as usize;
        j * self.nx + i
    }

    /// Compartment of a local point.
    pub fn compartment_at(&self, x: f64, y: f64) -> usize {
        self.fault.map_or(0, |f| f.compartment(x, y))
    }

    /// Oil column (m of net sand above the contact) of sand `k` at node `n`.
    pub fn oil_column(&self, k: usize, n: usize) -> f64 {
        let s = &self.sands[k];
        (self.owc[self.compartment[n]] - s.top[n]).clamp(0.0, s.thickness[n])
    }

    /// Total net sand thickness at node `n`, m.
    pub fn net_thickness(&self, n: usize) -> f64 {
        self.sands.iter().map(|s| s.thickness[n]).sum()
    }

    /// Depth of the base of the deepest sand at node `n`, m.
    pub fn base_depth(&self, n: usize) -> f64 {
        let last = self.sands.last().expect("at least one sand");
        last.top[n] + last.thickness[n]
    }

    /// Hydrocarbon pore volume at node `n` (m3): oil column x porosity x (1 - Swi) x node area.
    pub fn hcpv(&self, n: usize) -> f64 {
        let area = self.spacing * self.spacing;
        (0..self.sands.len())
            .map(|k| {
                let s = &self.sands[k];
                self.oil_column(k, n) * s.porosity[n] * (1.0 - s.swi[n]) * area
            })
            .sum()
    }

    /// Masks of the well-free regions, `(name, values)` with values 1 inside (weight at least one
    /// half) and 0 outside, in node order: `lobe` (when `lobe_radius > 0`) and `gas_cap` (when
    /// the field has the culmination).
    pub fn masks(&self) -> Vec<(String, Vec<f64>)> {
        let mask = |w: &[f64]| w.iter().map(|&v| f64::from(u8::from(v >= 0.5))).collect();
        let mut out = Vec::new();
        if self.lobe_radius > 0.0 {
            out.push(("lobe".to_string(), mask(&self.lobe)));
        }
        if let Some(c) = &self.gas_cap {
            out.push(("gas_cap".to_string(), mask(&c.weight)));
        }
        out
    }

    /// Builds the static model from the settings (assumed checked).
    pub fn build(s: &SynthSettings) -> Reservoir {
        let (nx, ny, dx) = (s.nx, s.ny, s.spacing);
        let n = nx * ny;
        let width = (nx - 1) as f64 * dx;
        let height = (ny - 1) as f64 * dx;
        let corr = s.correlation_length / dx;
        let field = |tag: u64| {
            let mut rng = StdRng::seed_from_u64(sub_seed(s.seed, &[1, tag]));
            gaussian_field(nx, ny, corr, &mut rng)
        };
        let rough = {
            let mut rng = StdRng::seed_from_u64(sub_seed(s.seed, &[1, 100]));
            gaussian_field(nx, ny, 2.0 * corr, &mut rng)
        };
        let fault = s.fault.then(|| {
            let a = s.fault_strike_deg.to_radians();
            Fault {
                point: (s.fault_position * width, 0.5 * height),
                normal: (a.sin(), -a.cos()),
                throw: s.fault_throw,
            }
        });
        let (xc, yc) = (0.45 * width, 0.5 * height);
        let (ax, ay) = (0.55 * width.max(dx), 0.5 * height.max(dx));
        let (lx, ly) = (s.lobe_position[0] * width, s.lobe_position[1] * height);
        let lobe_radius = s.lobe_radius * width.min(height);
        let dip = s.dip_deg.to_radians().tan();
        let (gx, gy) = (
            s.gas_cap_position[0] * width,
            s.gas_cap_position[1] * height,
        );
        let cap_radius = s.gas_cap_radius * width.min(height);
        let mut cap_weight = vec![0.0; if s.gas_cap { n } else { 0 }];

        let mut structure = vec![0.0; n];
        let mut compartment = vec![0; n];
        let mut lobe = vec![0.0; n];
        let mut no_well = vec![false; n];
        for idx in 0..n {
            let (x, y) = ((idx % nx) as f64 * dx, (idx / nx) as f64 * dx);
            let r2 = ((x - xc) / ax).powi(2) + ((y - yc) / ay).powi(2);
            let mut z = s.crest_depth
                + s.structural_relief * (1.0 - (-0.5 * r2).exp())
                + dip * (x - xc)
                + s.structure_roughness * rough[idx];
            if let Some(f) = fault {
                compartment[idx] = f.compartment(x, y);
                if compartment[idx] == 1 {
                    z += f.throw;
                }
            }
            let d = ((x - lx).powi(2) + (y - ly).powi(2)).sqrt() / lobe_radius.max(1e-9);
            lobe[idx] = region_weight(d);
            // a sand-rich lobe compacts less than the shales around it: a drape high over it
            z -= s.lobe_relief * lobe[idx];
            no_well[idx] = d < WELL_FREE_MARGIN;
            if s.gas_cap {
                let dc = (x - gx).hypot(y - gy) / cap_radius;
                cap_weight[idx] = region_weight(dc);
                z -= s.gas_cap_relief * cap_weight[idx];
                no_well[idx] |= dc < WELL_FREE_MARGIN;
            }
            structure[idx] = z;
        }

        let mut sands = Vec::with_capacity(s.sands);
        let mut interbed = Vec::new();
        let mut top = structure.clone();
        for k in 0..s.sands {
            let gk = field(10 + k as u64);
            let gp = field(20 + k as u64);
            let gv = field(30 + k as u64);
            let gf = field(40 + k as u64);
            let mean_h = if k == 0 {
                s.sand_thickness
            } else {
                0.85 * s.sand_thickness
            };
            let mut sand = Sand {
                top: top.clone(),
                thickness: vec![0.0; n],
                porosity: vec![0.0; n],
                vclay: vec![0.0; n],
                swi: vec![0.0; n],
                flow: vec![0.0; n],
            };
            for idx in 0..n {
                let h = mean_h + s.sand_thickness_sd * gk[idx] + s.lobe_thickness * lobe[idx];
                sand.thickness[idx] = h.max(0.0);
                let zp = 0.5 * gk[idx] + 0.866 * gp[idx];
                sand.porosity[idx] = (s.porosity + s.porosity_sd * zp - 0.01 * (k as f64)
                    + s.lobe_porosity * lobe[idx])
                    .clamp(0.05, 0.36);
                sand.vclay[idx] =
                    (s.vclay - s.vclay_sd * (0.6 * zp + 0.8 * gv[idx]) - 0.5 * s.vclay * lobe[idx])
                        .clamp(0.0, 0.45);
                sand.swi[idx] = (s.swi + 0.4 * (sand.vclay[idx] - s.vclay)).clamp(0.08, 0.45);
                sand.flow[idx] = (s.front_heterogeneity * (0.35 * zp + 0.25 * gf[idx])).exp();
            }
            for (t, h) in top.iter_mut().zip(&sand.thickness) {
                *t += h;
            }
            if k + 1 < s.sands {
                let gs = field(50 + k as u64);
                let gap: Vec<f64> = gs
                    .iter()
                    .map(|g| (s.interbed_thickness + s.interbed_thickness_sd * g).max(1.0))
                    .collect();
                for (t, g) in top.iter_mut().zip(&gap) {
                    *t += g;
                }
                interbed.push(gap);
            }
            sands.push(sand);
        }

        // Oil-water contact per compartment: the given fraction of the compartment's nodes has the
        // top of the upper sand above it.
        let mut owc = [0.0; 2];
        for c in 0..2 {
            let mut z: Vec<f64> = (0..n)
                .filter(|&i| compartment[i] == c)
                .map(|i| structure[i])
                .collect();
            if z.is_empty() {
                owc[c] = owc[0];
                continue;
            }
            z.sort_by(f64::total_cmp);
            let q = ((z.len() - 1) as f64 * s.oil_area_fraction).round() as usize;
            owc[c] = z[q];
        }

        let shale_noise = field(60);
        let shale_vp = (0..n)
            .map(|i| s.shale_vp0 + s.shale_vp_gradient * structure[i] + 40.0 * shale_noise[i])
            .collect();

        Reservoir {
            nx,
            ny,
            spacing: dx,
            sands,
            interbed,
            compartment,
            fault,
            owc,
            lobe,
            lobe_centre: (lx, ly),
            lobe_radius,
            crest: (xc, yc),
            gas_cap: s.gas_cap.then_some(GasCap {
                weight: cap_weight,
                centre: (gx, gy),
                radius: cap_radius,
            }),
            no_well,
            shale_vp,
        }
    }
}
