//! The generator's settings, their checks, its errors, and the seed of every random stream: what
//! the physics modules read, kept below the model and the generator that call them.

use super::json;
use super::rock::{FrameParams, Mixing};
use super::seismic::ReflectivityMethod;
use crate::grid::Grid;
use crate::io::IoError;
use serde::{Deserialize, Serialize};
use std::path::PathBuf;

/// Errors of the synthetic-field generator.
#[derive(Debug, thiserror::Error)]
pub enum SynthError {
    /// A setting is out of its valid range.
    #[error("synth setting `{key}` = {value}: {reason}")]
    Setting {
        /// Setting name.
        key: &'static str,
        /// The value given.
        value: String,
        /// What is allowed.
        reason: String,
    },
    /// The field could not be generated with these settings.
    #[error("cannot generate the field: {0}")]
    Generation(String),
    /// Writing a file of the project failed.
    #[error(transparent)]
    Io(#[from] IoError),
    /// The output folder or a file in it cannot be used.
    #[error("{}: {message}", path.display())]
    Output {
        /// The folder or file.
        path: PathBuf,
        /// What is wrong.
        message: String,
    },
}

/// Every knob of the generator. Defaults (in brackets) make the demo-sized Skerrow Bank field.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct SynthSettings {
    /// Seed of every random choice \[7\].
    pub seed: u64,
    /// Grid nodes along x \[120\], >= 10.
    pub nx: usize,
    /// Grid nodes along y \[100\], >= 10.
    pub ny: usize,
    /// Node spacing in metres, the same along x and y \[50\], > 0.
    pub spacing: f64,
    /// World x of node (0, 0), m \[20000\] (local engineering coordinates of an invented field).
    pub origin_x: f64,
    /// World y of node (0, 0), m \[40000\].
    pub origin_y: f64,
    /// Grid rotation, degrees counter-clockwise from east \[0\].
    pub rotation: f64,
    /// EPSG code written to the maps \[none: local engineering coordinates in metres, which the
    /// GeoTIFFs describe as such\].
    pub epsg: Option<u32>,
    /// Null value in the files \[-999.25\].
    pub null_value: f64,

    /// Number of wells \[45\], >= 2.
    pub wells: usize,
    /// Fraction of the wells that inject water \[0.3\], in \[0, 1).
    pub injector_fraction: f64,
    /// Observation wells besides `wells` \[0\], <= 1000: no flow, placed uniformly outside the
    /// lobe, measured at every monitor.
    pub observers: usize,
    /// Minimum distance between wells, m \[350\] (relaxed when the grid is too small).
    pub min_well_spacing: f64,
    /// Range of producer rates, reservoir m3/day \[200, 700\].
    pub producer_rate: [f64; 2],
    /// Range of injector rates, reservoir m3/day \[400, 1400\].
    pub injector_rate: [f64; 2],
    /// Number of monitor surveys (time steps m1..mN) \[4\], 1..=40.
    pub steps: usize,
    /// Date of the base survey, YYYY-MM-DD \["2016-06-01"\]; production starts then.
    pub base_date: String,
    /// Years between monitors \[1.5\], > 0.
    pub monitor_interval_years: f64,

    /// Number of stacked sands, 1 or 2 \[2\].
    pub sands: usize,
    /// Whether a sealing fault splits the field into two pressure compartments \[true\].
    pub fault: bool,
    /// Fault position along x as a fraction of the grid width \[0.62\].
    pub fault_position: f64,
    /// Fault strike, degrees counter-clockwise from the grid x axis \[78\].
    pub fault_strike_deg: f64,
    /// Fault throw, m (down to the far side) \[25\].
    pub fault_throw: f64,
    /// Depth of the crest of the top sand, m \[2350\].
    pub crest_depth: f64,
    /// Relief of the dome from crest to flanks, m \[160\].
    pub structural_relief: f64,
    /// Regional dip towards +x, degrees \[1\].
    pub dip_deg: f64,
    /// Standard deviation of the structural roughness, m \[4\].
    pub structure_roughness: f64,
    /// Fraction of each compartment whose top sand lies above its oil-water contact \[0.75\].
    pub oil_area_fraction: f64,
    /// Mean net thickness of the upper sand, m \[16\] (the lower sand: 85 % of it).
    pub sand_thickness: f64,
    /// Standard deviation of net sand thickness, m \[8\]; thinner than 0 means the sand pinches out.
    pub sand_thickness_sd: f64,
    /// Mean thickness of the shale between the sands, m \[7\].
    pub interbed_thickness: f64,
    /// Standard deviation of the interbed thickness, m \[3\].
    pub interbed_thickness_sd: f64,
    /// Mean porosity \[0.24\].
    pub porosity: f64,
    /// Standard deviation of porosity \[0.03\].
    pub porosity_sd: f64,
    /// Mean clay volume fraction of the sand mineral \[0.12\].
    pub vclay: f64,
    /// Standard deviation of the clay fraction \[0.05\].
    pub vclay_sd: f64,
    /// Mean irreducible water saturation \[0.18\].
    pub swi: f64,
    /// Residual oil saturation after water sweep \[0.22\].
    pub sor: f64,
    /// Correlation length of the rock property maps, m \[900\].
    pub correlation_length: f64,
    /// Centre of the well-free porous lobe, fractions of the grid width and height \[0.17, 0.78\].
    pub lobe_position: [f64; 2],
    /// Radius of the lobe as a fraction of the shorter grid side \[0.17\].
    pub lobe_radius: f64,
    /// Extra net sand in the lobe, m \[12\].
    pub lobe_thickness: f64,
    /// Extra porosity in the lobe \[0.04\].
    pub lobe_porosity: f64,
    /// Structural relief of the drape high over the lobe, m \[30\].
    pub lobe_relief: f64,
    /// Advance of the lobe's own aquifer front, m/year \[300\]; 0 leaves the lobe to the wells.
    pub lobe_aquifer_rate: f64,
    /// Whether the field holds a second well-free region \[false\]: a sealed culmination drained
    /// from beyond the survey, whose pressure falls on its own schedule until gas comes out of
    /// solution and gathers as a cap under its crest (see [`super::dynamics`]).
    pub gas_cap: bool,
    /// Centre of the drained culmination, fractions of the grid width and height \[0.78, 0.22\].
    pub gas_cap_position: [f64; 2],
    /// Radius of the culmination as a fraction of the shorter grid side \[0.12\].
    pub gas_cap_radius: f64,
    /// Structural relief of the culmination, m \[25\].
    pub gas_cap_relief: f64,
    /// Pressure drop the drainage tends to at long times, MPa \[10\].
    pub gas_cap_depletion: f64,
    /// Time constant of the culmination's pressure decline, years \[3\].
    pub gas_cap_decline_years: f64,

    /// Temperature at the datum, C \[6\].
    pub surface_temperature: f64,
    /// Geothermal gradient, C/m \[0.032\].
    pub temperature_gradient: f64,
    /// Formation-water density for the hydrostatic gradient, kg/m3 \[1040\].
    pub brine_density: f64,
    /// Brine salinity, NaCl weight fraction \[0.06\].
    pub salinity: f64,
    /// Mean overburden density for the vertical stress, kg/m3 \[2250\].
    pub overburden_density: f64,
    /// Overpressure above hydrostatic at the contact, MPa \[2\].
    pub overpressure: f64,
    /// Oil API gravity \[33\].
    pub api: f64,
    /// Gas specific gravity (air = 1) \[0.7\].
    pub gas_gravity: f64,
    /// Initial dissolved gas-oil ratio, L/L \[120\].
    pub gor: f64,
    /// Bubble point below the lowest initial oil-leg pressure, MPa \[2.5\].
    pub bubble_point_margin: f64,
    /// Largest gas saturation released from solution \[0.15\].
    pub gas_max: f64,
    /// Pressure shortfall scale of gas release, MPa \[5\].
    pub gas_pressure_scale: f64,

    /// Permeability for pressure diffusion, mD \[50\].
    pub permeability_md: f64,
    /// Fluid viscosity for pressure diffusion, cP \[0.9\].
    pub viscosity_cp: f64,
    /// Total compressibility (rock + fluids), 1/MPa \[1.5e-3\].
    pub total_compressibility: f64,
    /// Strength of the permeability heterogeneity that makes water fronts irregular \[1\]; 0 gives
    /// circular fronts.
    pub front_heterogeneity: f64,
    /// Rise of the oil-water contact by aquifer influx, m/year \[1\].
    pub aquifer_rise: f64,
    /// Uniaxial compaction coefficient of the sands, 1/MPa \[1.5e-4\].
    pub compaction_coefficient: f64,
    /// Fraction of the reservoir compaction taken up as overburden stretch \[0.6\].
    pub overburden_transfer: f64,
    /// Lateral smoothing (standard deviation) of the overburden stretch, m \[600\].
    pub overburden_smoothing: f64,
    /// Hatchell & Bourne R factor of the overburden \[5\].
    pub r_factor: f64,
    /// Mean overburden P velocity for depth-to-time conversion, m/s \[2400\].
    pub overburden_velocity: f64,

    /// Dry-frame stress law (MacBeth 2004) and porosity scaling.
    pub frame: FrameParams,
    /// Fluid mixing law \["wood"\] or "brie".
    pub mixing: Mixing,
    /// Brie exponent when mixing = "brie" \[3\].
    pub brie_exponent: f64,
    /// Shale P velocity at zero depth, m/s \[1800\].
    pub shale_vp0: f64,
    /// Shale P velocity gradient with depth, 1/s \[0.5\].
    pub shale_vp_gradient: f64,

    /// Ricker peak frequency, Hz \[30\].
    pub wavelet_hz: f64,
    /// Trace sample interval, ms \[2\].
    pub sample_ms: f64,
    /// Reflection coefficient formula \["zoeppritz"\], "aki_richards" or "shuey".
    pub reflectivity: ReflectivityMethod,
    /// Angle ranges of the near, mid and far stacks, degrees \[\[5, 15\], \[15, 25\], \[25, 35\]\].
    pub angle_stacks: [[f64; 2]; 3],
    /// Amplitude window above the reservoir top and below its base, ms \[12\].
    pub window_pad_ms: f64,
    /// Half-length of the window centred on the top horizon in which the stack amplitudes for the
    /// intercept and gradient are averaged, ms \[0: the sample on the horizon\] (at most
    /// `window_pad_ms`).
    pub avo_window_ms: f64,
    /// Signal-to-noise ratio of the amplitudes (RMS over RMS) \[12\].
    pub snr: f64,
    /// Correlation length of the seismic noise across the grid, m \[150\].
    pub noise_correlation_length: f64,
    /// Correlation of the noise between angle stacks \[0.5\].
    pub noise_stack_correlation: f64,
    /// Standard deviation of the time-shift measurement error, ms \[0.15\].
    pub time_shift_noise_ms: f64,
    /// Correlation length of the time-shift error, m \[300\].
    pub time_shift_noise_correlation: f64,

    /// Standard deviation of the pressure-change measurement at wells, MPa \[0.3\].
    pub well_noise_dp: f64,
    /// Standard deviation of the water-saturation-change measurement at wells \[0.02\].
    pub well_noise_dsw: f64,
    /// Standard deviation of the gas-saturation-change measurement at wells \[0.01\].
    pub well_noise_dsg: f64,
}

impl Default for SynthSettings {
    fn default() -> Self {
        SynthSettings {
            seed: 7,
            nx: 120,
            ny: 100,
            spacing: 50.0,
            origin_x: 20_000.0,
            origin_y: 40_000.0,
            rotation: 0.0,
            epsg: None,
            null_value: -999.25,
            wells: 45,
            injector_fraction: 0.3,
            observers: 0,
            min_well_spacing: 350.0,
            producer_rate: [200.0, 700.0],
            injector_rate: [400.0, 1400.0],
            steps: 4,
            base_date: "2016-06-01".into(),
            monitor_interval_years: 1.5,
            sands: 2,
            fault: true,
            fault_position: 0.62,
            fault_strike_deg: 78.0,
            fault_throw: 25.0,
            crest_depth: 2350.0,
            structural_relief: 160.0,
            dip_deg: 1.0,
            structure_roughness: 4.0,
            oil_area_fraction: 0.75,
            sand_thickness: 16.0,
            sand_thickness_sd: 8.0,
            interbed_thickness: 7.0,
            interbed_thickness_sd: 3.0,
            porosity: 0.24,
            porosity_sd: 0.03,
            vclay: 0.12,
            vclay_sd: 0.05,
            swi: 0.18,
            sor: 0.22,
            correlation_length: 900.0,
            lobe_position: [0.17, 0.78],
            lobe_radius: 0.17,
            lobe_thickness: 12.0,
            lobe_porosity: 0.04,
            lobe_relief: 30.0,
            lobe_aquifer_rate: 300.0,
            gas_cap: false,
            gas_cap_position: [0.78, 0.22],
            gas_cap_radius: 0.12,
            gas_cap_relief: 25.0,
            gas_cap_depletion: 10.0,
            gas_cap_decline_years: 3.0,
            surface_temperature: 6.0,
            temperature_gradient: 0.032,
            brine_density: 1040.0,
            salinity: 0.06,
            overburden_density: 2250.0,
            overpressure: 2.0,
            api: 33.0,
            gas_gravity: 0.7,
            gor: 120.0,
            bubble_point_margin: 2.5,
            gas_max: 0.15,
            gas_pressure_scale: 5.0,
            permeability_md: 50.0,
            viscosity_cp: 0.9,
            total_compressibility: 1.5e-3,
            front_heterogeneity: 1.0,
            aquifer_rise: 1.0,
            compaction_coefficient: 1.5e-4,
            overburden_transfer: 0.6,
            overburden_smoothing: 600.0,
            r_factor: 5.0,
            overburden_velocity: 2400.0,
            frame: FrameParams::default(),
            mixing: Mixing::Wood,
            brie_exponent: 3.0,
            shale_vp0: 1800.0,
            shale_vp_gradient: 0.5,
            wavelet_hz: 30.0,
            sample_ms: 2.0,
            reflectivity: ReflectivityMethod::Zoeppritz,
            angle_stacks: [[5.0, 15.0], [15.0, 25.0], [25.0, 35.0]],
            window_pad_ms: 12.0,
            avo_window_ms: 0.0,
            snr: 12.0,
            noise_correlation_length: 150.0,
            noise_stack_correlation: 0.5,
            time_shift_noise_ms: 0.15,
            time_shift_noise_correlation: 300.0,
            well_noise_dp: 0.3,
            well_noise_dsw: 0.02,
            well_noise_dsg: 0.01,
        }
    }
}

/// Wells keep out of a region's disc enlarged by this factor (the lobe and the culmination).
pub const WELL_FREE_MARGIN: f64 = 1.35;

/// Largest grid the generator accepts (its angle-stack traces are held in memory).
pub const MAX_NODES: usize = 500_000;

/// Parses "YYYY-MM-DD" into (year, month, day).
fn parse_date(d: &str) -> Option<(i32, u32, u32)> {
    let mut it = d.split('-');
    let y: i32 = it.next()?.parse().ok()?;
    let m: u32 = it.next()?.parse().ok()?;
    let day: u32 = it.next()?.parse().ok()?;
    if it.next().is_some() || d.len() != 10 || !(1..=12).contains(&m) || !(1..=31).contains(&day) {
        return None;
    }
    Some((y, m, day))
}

impl SynthSettings {
    /// Checks every setting; the error names the setting, the value and the valid range.
    pub fn validate(&self) -> Result<(), SynthError> {
        fn bad<T: std::fmt::Debug>(key: &'static str, v: T, reason: &str) -> SynthError {
            SynthError::Setting {
                key,
                value: format!("{v:?}"),
                reason: reason.to_string(),
            }
        }
        let pos = |key: &'static str, v: f64| {
            if v.is_finite() && v > 0.0 {
                Ok(())
            } else {
                Err(bad(key, v, "must be a finite number > 0"))
            }
        };
        let nonneg = |key: &'static str, v: f64| {
            if v.is_finite() && v >= 0.0 {
                Ok(())
            } else {
                Err(bad(key, v, "must be a finite number >= 0"))
            }
        };
        let frac = |key: &'static str, v: f64, lo: f64, hi: f64| {
            if v.is_finite() && v >= lo && v <= hi {
                Ok(())
            } else {
                Err(bad(key, v, &format!("must lie in [{lo}, {hi}]")))
            }
        };
        let finite = |key: &'static str, v: f64| {
            if v.is_finite() {
                Ok(())
            } else {
                Err(bad(key, v, "must be finite"))
            }
        };
        if self.nx < 10 || self.nx > 4000 {
            return Err(bad("nx", self.nx, "must lie in 10..=4000"));
        }
        if self.ny < 10 || self.ny > 4000 {
            return Err(bad("ny", self.ny, "must lie in 10..=4000"));
        }
        if self.nx * self.ny > MAX_NODES {
            return Err(bad(
                "nx",
                self.nx,
                &format!(
                    "nx * ny = {} exceeds {MAX_NODES} nodes (the traces are held in memory)",
                    self.nx * self.ny
                ),
            ));
        }
        pos("spacing", self.spacing)?;
        finite("origin_x", self.origin_x)?;
        finite("origin_y", self.origin_y)?;
        finite("rotation", self.rotation)?;
        finite("null_value", self.null_value)?;
        if self.wells < 2 || self.wells > 1000 {
            return Err(bad("wells", self.wells, "must lie in 2..=1000"));
        }
        if self.observers > 1000 {
            return Err(bad("observers", self.observers, "must lie in 0..=1000"));
        }
        frac("injector_fraction", self.injector_fraction, 0.0, 0.9)?;
        nonneg("min_well_spacing", self.min_well_spacing)?;
        for (key, r) in [
            ("producer_rate", self.producer_rate),
            ("injector_rate", self.injector_rate),
        ] {
            if !(r[0].is_finite() && r[1].is_finite() && r[0] > 0.0 && r[0] <= r[1]) {
                return Err(bad(key, r, "must be [min, max] with 0 < min <= max"));
            }
        }
        if self.steps == 0 || self.steps > 40 {
            return Err(bad("steps", self.steps, "must lie in 1..=40"));
        }
        if parse_date(&self.base_date).is_none() {
            return Err(bad(
                "base_date",
                &self.base_date,
                "must be a date YYYY-MM-DD",
            ));
        }
        frac(
            "monitor_interval_years",
            self.monitor_interval_years,
            0.05,
            20.0,
        )?;
        if !(1..=2).contains(&self.sands) {
            return Err(bad("sands", self.sands, "must be 1 or 2"));
        }
        frac("fault_position", self.fault_position, 0.2, 0.8)?;
        frac("fault_strike_deg", self.fault_strike_deg, 45.0, 135.0)?;
        nonneg("fault_throw", self.fault_throw)?;
        frac("crest_depth", self.crest_depth, 300.0, 6000.0)?;
        nonneg("structural_relief", self.structural_relief)?;
        frac("dip_deg", self.dip_deg, -10.0, 10.0)?;
        nonneg("structure_roughness", self.structure_roughness)?;
        frac("oil_area_fraction", self.oil_area_fraction, 0.2, 1.0)?;
        pos("sand_thickness", self.sand_thickness)?;
        nonneg("sand_thickness_sd", self.sand_thickness_sd)?;
        pos("interbed_thickness", self.interbed_thickness)?;
        nonneg("interbed_thickness_sd", self.interbed_thickness_sd)?;
        frac("porosity", self.porosity, 0.05, 0.35)?;
        frac("porosity_sd", self.porosity_sd, 0.0, 0.1)?;
        frac("vclay", self.vclay, 0.0, 0.45)?;
        frac("vclay_sd", self.vclay_sd, 0.0, 0.2)?;
        frac("swi", self.swi, 0.05, 0.5)?;
        frac("sor", self.sor, 0.05, 0.45)?;
        if self.swi + self.sor >= 0.8 {
            return Err(bad("sor", self.sor, "swi + sor must stay below 0.8"));
        }
        pos("correlation_length", self.correlation_length)?;
        for v in self.lobe_position {
            frac("lobe_position", v, 0.0, 1.0)?;
        }
        frac("lobe_radius", self.lobe_radius, 0.0, 0.4)?;
        nonneg("lobe_thickness", self.lobe_thickness)?;
        frac("lobe_porosity", self.lobe_porosity, 0.0, 0.1)?;
        nonneg("lobe_relief", self.lobe_relief)?;
        nonneg("lobe_aquifer_rate", self.lobe_aquifer_rate)?;
        for v in self.gas_cap_position {
            frac("gas_cap_position", v, 0.0, 1.0)?;
        }
        frac("gas_cap_radius", self.gas_cap_radius, 0.01, 0.4)?;
        frac("gas_cap_relief", self.gas_cap_relief, 0.0, 200.0)?;
        frac("gas_cap_depletion", self.gas_cap_depletion, 0.0, 40.0)?;
        frac(
            "gas_cap_decline_years",
            self.gas_cap_decline_years,
            0.05,
            100.0,
        )?;
        if self.gas_cap && self.lobe_radius > 0.0 {
            // the two regions and their well-free margins must not touch, so that each mask
            // holds one kind of ground
            let (w, h) = (
                (self.nx - 1) as f64 * self.spacing,
                (self.ny - 1) as f64 * self.spacing,
            );
            let short = w.min(h);
            let gap = ((self.gas_cap_position[0] - self.lobe_position[0]) * w)
                .hypot((self.gas_cap_position[1] - self.lobe_position[1]) * h);
            let need = WELL_FREE_MARGIN * (self.gas_cap_radius + self.lobe_radius) * short;
            if gap < need {
                return Err(bad(
                    "gas_cap_position",
                    self.gas_cap_position,
                    &format!(
                        "the culmination's centre lies {gap:.0} m from the lobe's; with their \
                         well-free margins they need {need:.0} m"
                    ),
                ));
            }
        }
        frac("surface_temperature", self.surface_temperature, -5.0, 60.0)?;
        frac("temperature_gradient", self.temperature_gradient, 0.0, 0.08)?;
        frac("brine_density", self.brine_density, 950.0, 1250.0)?;
        frac("salinity", self.salinity, 0.0, 0.3)?;
        frac(
            "overburden_density",
            self.overburden_density,
            1800.0,
            2800.0,
        )?;
        frac("overpressure", self.overpressure, -5.0, 40.0)?;
        frac("api", self.api, 10.0, 60.0)?;
        frac("gas_gravity", self.gas_gravity, 0.55, 1.5)?;
        frac("gor", self.gor, 0.0, 400.0)?;
        nonneg("bubble_point_margin", self.bubble_point_margin)?;
        frac("gas_max", self.gas_max, 0.0, 0.5)?;
        pos("gas_pressure_scale", self.gas_pressure_scale)?;
        pos("permeability_md", self.permeability_md)?;
        pos("viscosity_cp", self.viscosity_cp)?;
        pos("total_compressibility", self.total_compressibility)?;
        frac("front_heterogeneity", self.front_heterogeneity, 0.0, 5.0)?;
        nonneg("aquifer_rise", self.aquifer_rise)?;
        frac(
            "compaction_coefficient",
            self.compaction_coefficient,
            0.0,
            0.01,
        )?;
        frac("overburden_transfer", self.overburden_transfer, 0.0, 1.0)?;
        nonneg("overburden_smoothing", self.overburden_smoothing)?;
        frac("r_factor", self.r_factor, 0.0, 40.0)?;
        pos("overburden_velocity", self.overburden_velocity)?;
        let f = &self.frame;
        for (key, v) in [
            ("frame.k_inf", f.k_inf),
            ("frame.mu_inf", f.mu_inf),
            ("frame.p_k", f.p_k),
            ("frame.p_mu", f.p_mu),
        ] {
            pos(key, v)?;
        }
        frac("frame.s_k", f.s_k, 0.0, 0.99)?;
        frac("frame.s_mu", f.s_mu, 0.0, 0.99)?;
        frac("frame.phi_c", f.phi_c, 0.3, 0.5)?;
        frac("frame.phi_ref", f.phi_ref, 0.01, f.phi_c - 0.01)?;
        frac("brie_exponent", self.brie_exponent, 1.0, 40.0)?;
        pos("shale_vp0", self.shale_vp0)?;
        nonneg("shale_vp_gradient", self.shale_vp_gradient)?;
        frac("wavelet_hz", self.wavelet_hz, 5.0, 120.0)?;
        frac("sample_ms", self.sample_ms, 0.25, 8.0)?;
        let mut last = 0.0;
        for r in self.angle_stacks {
            if !(r[0] >= last && r[0] < r[1] && r[1] <= 50.0) {
                return Err(bad(
                    "angle_stacks",
                    self.angle_stacks,
                    "must be three increasing, non-overlapping ranges within 0..50 degrees",
                ));
            }
            last = r[1];
        }
        frac("window_pad_ms", self.window_pad_ms, 0.0, 200.0)?;
        frac("avo_window_ms", self.avo_window_ms, 0.0, 50.0)?;
        frac("snr", self.snr, 0.1, 1e9)?;
        nonneg("noise_correlation_length", self.noise_correlation_length)?;
        frac(
            "noise_stack_correlation",
            self.noise_stack_correlation,
            0.0,
            1.0,
        )?;
        nonneg("time_shift_noise_ms", self.time_shift_noise_ms)?;
        nonneg(
            "time_shift_noise_correlation",
            self.time_shift_noise_correlation,
        )?;
        nonneg("well_noise_dp", self.well_noise_dp)?;
        nonneg("well_noise_dsw", self.well_noise_dsw)?;
        nonneg("well_noise_dsg", self.well_noise_dsg)?;
        Ok(())
    }

    /// Reads settings from JSON text exactly (every float as written); unknown keys are refused and
    /// missing keys take their defaults.
    pub fn from_json(text: &str) -> Result<SynthSettings, String> {
        let value = json::parse(text)?;
        serde_json::from_value(value).map_err(|e| e.to_string())
    }

    /// The map grid these settings describe.
    pub fn grid(&self) -> Grid {
        Grid {
            origin_x: self.origin_x,
            origin_y: self.origin_y,
            dx: self.spacing,
            dy: self.spacing,
            nx: self.nx,
            ny: self.ny,
            rotation: self.rotation,
            epsg: self.epsg,
            null_value: self.null_value,
        }
    }

    /// Names of the time steps: m1..mN.
    pub fn step_names(&self) -> Vec<String> {
        (1..=self.steps).map(|k| format!("m{k}")).collect()
    }

    /// Time of each monitor survey, years after the base.
    pub fn monitor_years(&self) -> Vec<f64> {
        (1..=self.steps)
            .map(|k| k as f64 * self.monitor_interval_years)
            .collect()
    }

    /// Date of each monitor survey (the base date plus the interval, rounded to whole months).
    pub fn monitor_dates(&self) -> Vec<String> {
        let (y, m, d) = parse_date(&self.base_date).unwrap_or((2016, 6, 1));
        self.monitor_years()
            .iter()
            .map(|t| {
                let months = (y as i64) * 12 + (m as i64 - 1) + (t * 12.0).round() as i64;
                format!(
                    "{:04}-{:02}-{:02}",
                    months.div_euclid(12),
                    months.rem_euclid(12) + 1,
                    d.min(28)
                )
            })
            .collect()
    }
}

/// Mixes a seed with a path of tags into an independent seed (SplitMix64 finaliser, Steele, Lea &
/// Flood 2014), so that every component and item has its own random stream.
pub fn sub_seed(seed: u64, tags: &[u64]) -> u64 {
    fn mix(mut z: u64) -> u64 {
        z = z.wrapping_add(0x9E37_79B9_7F4A_7C15);
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    tags.iter().fold(mix(seed), |h, t| {
        mix(h ^ mix(t.wrapping_add(0x51_7CC1_B727_220A)))
    })
}
