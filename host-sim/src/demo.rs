//! The built-in demo: an invented plant, its historian log and lab results,
//! generated and then replayed exactly as a user's files would be.
//!
//! The plant: reactor R-2 of the (fictional) Brookmere soap works, a 1.6 m
//! stirred vessel with a dished bottom where caustic soda and ethyl acetate
//! (0.1 mol/L each) saponify to sodium acetate. Two metered feed pumps, a
//! metered product outlet on level control, a jacket temperature and a level
//! transmitter; the caustic meter reads 3 % high. Over 12 h the ester pump
//! sags to 80 % (3 h to 7 h) and the
//! jacket warms the batch from 25 °C to 35 °C (4 h to 6 h). The historian
//! stores every second with realistic noise, loses the caustic meter for two
//! minutes at 5 h and has a fifteen-minute hole at 8 h. The lab analyses a grab
//! sample every 2 h and reports 45 minutes later.
//!
//! The "true" plant behind the log is simulated with the same kernel in
//! `f64`; the replay then runs in `f32` from the noisy log, as the gateway
//! would.

use std::fmt::Write as _;
use std::path::Path;

use holdup_kernel::reference;
use holdup_kernel::Inputs;

use crate::text::iso;

/// The demo plant's configuration file (`fixtures/demo/plant.toml`).
pub const PLANT_TOML: &str = include_str!("../../fixtures/demo/plant.toml");

/// Start of the demo log: 2026-03-02T06:00:00+01:00 (ms since the epoch).
pub const START_MS: i64 = 1_772_427_600_000;
/// Length of the demo, ms (12 h).
pub const LENGTH_MS: i64 = 12 * 3_600_000;

/// A small deterministic generator (SplitMix64) with normal deviates
/// (Box–Muller), so the demo is the same on every machine.
pub struct Noise(u64);

impl Noise {
    /// Seeded generator.
    pub fn new(seed: u64) -> Self {
        Self(seed)
    }

    /// Uniform in [0, 1).
    pub fn uniform(&mut self) -> f64 {
        self.0 = self.0.wrapping_add(0x9e37_79b9_7f4a_7c15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
        z ^= z >> 31;
        (z >> 11) as f64 / (1u64 << 53) as f64
    }

    /// Standard normal.
    pub fn normal(&mut self) -> f64 {
        let u1 = self.uniform().max(1e-300);
        let u2 = self.uniform();
        (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
    }
}

/// Files written by [`generate`].
pub struct DemoFiles {
    /// plant.toml
    pub config: std::path::PathBuf,
    /// log.csv
    pub log: std::path::PathBuf,
    /// lab.csv
    pub lab: std::path::PathBuf,
}

/// Write the demo plant, its log and its lab results into `dir`.
pub fn generate(dir: &Path) -> std::io::Result<DemoFiles> {
    std::fs::create_dir_all(dir)?;
    let config = dir.join("plant.toml");
    std::fs::write(&config, PLANT_TOML)?;

    let mut plant = reference::vessel::<f64>()
        .map_err(|e| std::io::Error::other(format!("reference plant: {e}")))?;
    let mut noise = Noise::new(0x005e_ed0f_d370);
    let mut log = String::with_capacity(64 * (LENGTH_MS / 1000) as usize);
    log.push_str("time,FI-101,FI-102,FI-201,TI-301,LI-301\n");
    let mut lab = String::from("sample_time,result_time,species,value,unit\n");
    let names = ["NaOH", "EtOAc", "NaOAc"];
    let offset = chrono::FixedOffset::east_opt(3600).expect("1 h is a valid offset");
    let local = |ms: i64| {
        chrono::DateTime::from_timestamp_millis(ms)
            .map(|d| {
                d.with_timezone(&offset)
                    .format("%Y-%m-%dT%H:%M:%S%:z")
                    .to_string()
            })
            .unwrap_or_default()
    };
    let level_setpoint = 1.36;
    let hour = 3_600_000i64;
    let mut t = 0i64;
    while t <= LENGTH_MS {
        // The true plant at time t.
        let mut u: Inputs<f64, 3, 2, 1> = reference::inputs_at(0);
        let q_nom = reference::PUMP_FLOW;
        let wobble = 1.0 + 0.02 * ((t as f64) / 2.1e6).sin();
        u.inlet_flows[0] = q_nom * wobble;
        u.inlet_flows[1] = q_nom
            * if (3 * hour..7 * hour).contains(&t) {
                0.8
            } else {
                1.0
            };
        let temp_c = if t < 4 * hour {
            25.0
        } else if t < 6 * hour {
            25.0 + 10.0 * (t - 4 * hour) as f64 / (2 * hour) as f64
        } else {
            35.0
        };
        u.temperature = temp_c + 273.15;
        let level = plant.level();
        // Level controller on the product valve (P only, 0.5 m³/h per 10 cm).
        let q_out =
            (u.inlet_flows[0] + u.inlet_flows[1] + 0.5 / 3600.0 * (level - level_setpoint) / 0.1)
                .max(0.0);
        u.outlet_flows[0] = q_out;

        // The historian's view, with a hole from 8 h to 8 h 15.
        let in_gap = (8 * hour..8 * hour + 15 * 60_000).contains(&t);
        if !in_gap {
            let meter = |q: f64, n: &mut Noise| q * 3600.0 * (1.0 + 0.01 * n.normal());
            // The caustic meter reads 3 % high.
            let fi101 = if (5 * hour..5 * hour + 120_000).contains(&t) {
                "NaN".to_string()
            } else {
                format!("{:.4}", 1.03 * meter(u.inlet_flows[0], &mut noise))
            };
            let _ = writeln!(
                log,
                "{},{},{:.4},{:.4},{:.2},{:.4}",
                local(START_MS + t),
                fi101,
                meter(u.inlet_flows[1], &mut noise),
                meter(q_out, &mut noise),
                temp_c + 0.1 * noise.normal(),
                level + 0.002 * noise.normal(),
            );
        }
        // Grab samples every 2 h, analysed with 2 % error, known 45 min later.
        if t > 0 && t % (2 * hour) == 0 {
            let c = plant.concentrations();
            for (name, ci) in names.iter().zip(c.iter()) {
                let _ = writeln!(
                    lab,
                    "{},{},{},{:.4},mol/L",
                    local(START_MS + t),
                    local(START_MS + t + 45 * 60_000),
                    name,
                    ci * (1.0 + 0.02 * noise.normal()) / 1000.0
                );
            }
        }
        plant.step(&u);
        t += 1000;
    }
    let log_path = dir.join("log.csv");
    std::fs::write(&log_path, log)?;
    let lab_path = dir.join("lab.csv");
    std::fs::write(&lab_path, lab)?;
    Ok(DemoFiles {
        config,
        log: log_path,
        lab: lab_path,
    })
}

/// The demo plant with the saponification's rate constant and activation
/// energy marked unknown (first guesses half and three quarters of the
/// truth), written as `plant-fit.toml` in `dir` for `holdup demo --fit`.
pub fn write_fit_plant(dir: &Path) -> std::io::Result<std::path::PathBuf> {
    let known_k = "rate_constant = { value = 0.11, unit = \"L/(mol*s)\" }";
    let known_ea = "activation_energy = { value = 41, unit = \"kJ/mol\" }";
    if !PLANT_TOML.contains(known_k) || !PLANT_TOML.contains(known_ea) {
        return Err(std::io::Error::other(
            "the demo plant no longer holds the saponification's constants as written here",
        ));
    }
    let text = PLANT_TOML
        .replacen(
            known_k,
            "rate_constant = { guess = 0.05, unit = \"L/(mol*s)\", min = 0.001, max = 10 }",
            1,
        )
        .replacen(
            known_ea,
            "activation_energy = { guess = 30, unit = \"kJ/mol\", min = 0, max = 150 }",
            1,
        );
    let path = dir.join("plant-fit.toml");
    std::fs::write(&path, text)?;
    Ok(path)
}

/// Start of the demo in ISO 8601 (for messages).
pub fn start_iso() -> String {
    iso(START_MS)
}
