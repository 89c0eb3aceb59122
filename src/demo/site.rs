//! One cold-storage site of the demo fleet: its fixed characteristics and the simulation
//! of its sensor rows over time. Invented data for the demo; not a test oracle.
//!
//! The compressor's electrical power follows the textbook refrigeration relation:
//! heat load (kW) divided by the coefficient of performance
//! COP = η · T_evap / (T_cond − T_evap) (Carnot's limit times a second-law efficiency η,
//! temperatures in kelvin), capped at the installed capacity, with a few % of noise,
//! short spikes (compressor starts) and sensor dropouts.

use rand::Rng;
use rand_chacha::ChaCha8Rng;
use rand_distr::StandardNormal;

use super::calendar::{weekday, MS_PER_DAY};

/// Absolute zero offset, K.
const KELVIN: f64 = 273.15;
/// Milliseconds in one hour.
const MS_PER_HOUR: f64 = 3_600_000.0;
/// Day of the year (0-based) of the northern-hemisphere seasonal temperature peak.
const SEASON_PEAK_DAY: f64 = 200.0;
/// Largest excursion of the slow weather anomaly, K.
const WEATHER_LIMIT: f64 = 4.0;

/// Extra power the faulty site's compressor draws at the end of its fault (a COP lower by
/// this factor): about 15 %, as the scenario describes.
pub const FAULT_EXTRA: f64 = 0.15;

/// The fixed characteristics of one site.
#[derive(Clone, Debug)]
pub(crate) struct SiteParams {
    /// Annual mean outdoor temperature, °C.
    pub mean_temp: f64,
    /// Seasonal half-swing of the outdoor temperature, K.
    pub season_amp: f64,
    /// Day-night half-swing of the outdoor temperature, K.
    pub daily_amp: f64,
    /// Day of the year (0-based) of the seasonal peak.
    pub season_peak: f64,
    /// Mean outdoor relative humidity, %.
    pub mean_rh: f64,
    /// Room setpoint, °C (frozen −25 … −18 or chilled 0 … 4).
    pub setpoint: f64,
    /// Condensing temperature above outdoor, K (8 … 12).
    pub cond_approach: f64,
    /// Extra condensing approach reached by the end of the year from fouling, K.
    pub fouling: f64,
    /// Evaporating temperature below the setpoint, K (6 … 10).
    pub evap_approach: f64,
    /// Second-law efficiency η of the refrigeration cycle (0.45 … 0.55).
    pub eta: f64,
    /// Envelope heat-transfer coefficient times area, kW/K.
    pub ua: f64,
    /// Air mass flow through an open door, kg/s.
    pub door_flow: f64,
    /// Pull-down heat per tonne of product moved in the hour, kW per t.
    pub product_kw_per_t: f64,
    /// Fans and lights, kW.
    pub fixed_kw: f64,
    /// Defrost heater power, kW.
    pub defrost_kw: f64,
    /// Defrost cycles a day (3 … 4).
    pub defrosts_per_day: u32,
    /// Length of one defrost cycle, min.
    pub defrost_min: f64,
    /// Scale of door traffic (busier or quieter site).
    pub traffic: f64,
    /// Installed electrical capacity of the compressors, kW.
    pub capacity_kw: f64,
    /// True for the hot-climate site with a heat wave in the last month.
    pub hot: bool,
}

impl SiteParams {
    /// Draws a site's characteristics; `hot` makes it the fleet's hot-climate site.
    pub fn draw(rng: &mut ChaCha8Rng, hot: bool) -> SiteParams {
        let frozen = rng.random::<f64>() < 0.6;
        let mut p = SiteParams {
            mean_temp: rng.random_range(4.0..11.0),
            season_amp: rng.random_range(8.0..11.0),
            daily_amp: rng.random_range(3.0..5.0),
            season_peak: SEASON_PEAK_DAY,
            mean_rh: rng.random_range(62.0..80.0),
            setpoint: if frozen {
                rng.random_range(-25.0..-18.0)
            } else {
                rng.random_range(0.0..4.0)
            },
            cond_approach: rng.random_range(8.0..12.0),
            fouling: if rng.random::<f64>() < 0.1 {
                rng.random_range(3.0..6.0)
            } else {
                0.0
            },
            evap_approach: rng.random_range(6.0..10.0),
            eta: rng.random_range(0.45..0.55),
            ua: rng.random_range(1.2..2.5),
            door_flow: rng.random_range(1.5..3.0),
            product_kw_per_t: rng.random_range(1.5..3.0),
            fixed_kw: rng.random_range(8.0..15.0),
            defrost_kw: rng.random_range(15.0..30.0),
            defrosts_per_day: rng.random_range(3..=4),
            defrost_min: rng.random_range(20.0..35.0),
            traffic: rng.random_range(0.7..1.3),
            capacity_kw: 0.0,
            hot,
        };
        if hot {
            // A hot, dry climate in the southern hemisphere: summer peaks in January.
            p.mean_temp = 20.0;
            p.season_amp = 6.0;
            p.daily_amp = 6.0;
            p.season_peak = 20.0;
            p.mean_rh = 40.0;
        }
        // Installed capacity: 1.3 … 1.6 times the draw on a design day (32 °C, humid,
        // busy doors, 10 t an hour), so only extreme hours reach the cap.
        let design =
            p.heat_load_kw(32.0, 60.0, p.setpoint + 1.0, 20.0, 10.0, false) / p.cop(32.0, 0.0);
        p.capacity_kw = design * rng.random_range(1.3..1.6);
        p
    }

    /// Coefficient of performance at an outdoor temperature (°C), with `fouling_k` K of
    /// extra condensing approach: η · T_evap / (T_cond − T_evap), temperatures in K.
    pub fn cop(&self, outdoor_temp: f64, fouling_k: f64) -> f64 {
        let t_cond = outdoor_temp + self.cond_approach + fouling_k + KELVIN;
        let t_evap = self.setpoint - self.evap_approach + KELVIN;
        self.eta * t_evap / (t_cond - t_evap).max(5.0)
    }

    /// Heat load to remove, kW: envelope + door infiltration + product pull-down + fans
    /// and lights + defrost heat.
    pub fn heat_load_kw(
        &self,
        outdoor_temp: f64,
        outdoor_rh: f64,
        room_temp: f64,
        door_open_min: f64,
        product_load_t: f64,
        defrost: bool,
    ) -> f64 {
        let envelope = self.ua * (outdoor_temp - room_temp);
        let dh = (enthalpy(outdoor_temp, outdoor_rh) - enthalpy(room_temp, 90.0)).max(0.0);
        let infiltration = self.door_flow * dh * door_open_min / 60.0;
        let product = self.product_kw_per_t * product_load_t;
        let defrost_heat = if defrost { self.defrost_kw } else { 0.0 };
        (envelope + infiltration + product).max(0.0) + self.fixed_kw + defrost_heat
    }
}

/// Specific enthalpy of moist air, kJ per kg of dry air, at temperature `t` (°C) and
/// relative humidity `rh` (%), at sea-level pressure: h = 1.006 t + w (2501 + 1.86 t),
/// with the humidity ratio w = 0.622 p_v / (p − p_v) and the saturation pressure from the
/// Magnus formula (Alduchov & Eskridge, J. Applied Meteorology 35, 1996).
fn enthalpy(t: f64, rh: f64) -> f64 {
    let p_sat = 0.610_94 * (17.625 * t / (t + 243.04)).exp(); // kPa
    let p_v = (rh / 100.0) * p_sat;
    let w = 0.622 * p_v / (101.325 - p_v);
    1.006 * t + w * (2501.0 + 1.86 * t)
}

/// The columns of one stretch of rows of one site (`None` = sensor dropout).
#[derive(Debug, Default)]
pub(crate) struct Rows {
    /// Timestamps, ms since the Unix epoch (UTC).
    pub ts: Vec<i64>,
    /// Outdoor temperature, °C.
    pub outdoor_temp: Vec<f64>,
    /// Outdoor relative humidity, % (dropouts).
    pub outdoor_rh: Vec<Option<f64>>,
    /// Room setpoint, °C.
    pub room_setpoint: Vec<f64>,
    /// Room temperature, °C (dropouts).
    pub room_temp: Vec<Option<f64>>,
    /// Minutes the doors were open in the last hour.
    pub door_open_min: Vec<f64>,
    /// Tonnes of product moved in the last hour.
    pub product_load_t: Vec<f64>,
    /// 1 while a defrost cycle runs.
    pub defrost: Vec<i32>,
    /// Hour of the day, UTC, 0–23.
    pub hour: Vec<i32>,
    /// Compressor electrical power, kW.
    pub compressor_kw: Vec<f64>,
}

/// The evolving state of one site's simulation (slow weather, room lag, sensor outages).
#[derive(Debug)]
pub(crate) struct SiteSim {
    /// The site's characteristics.
    pub params: SiteParams,
    /// The site's own random stream.
    rng: ChaCha8Rng,
    /// Slow weather anomaly, K (an Ornstein–Uhlenbeck process).
    weather: f64,
    /// Lagged room temperature offset from the setpoint, K.
    room_offset: f64,
    /// Time of the previous row, ms.
    last_ms: Option<i64>,
    /// Rows left in the current outage of the humidity sensor / room sensor.
    outage: [u32; 2],
    /// Start of the year, ms (for the season and fouling growth).
    year_start_ms: i64,
    /// Start of the last month, ms (heat wave at the hot site).
    last_month_start_ms: i64,
    /// With the injected fault: when its compressor starts losing efficiency and when
    /// the loss is complete (the last two weeks of the year), ms.
    fault: Option<(i64, i64)>,
}

impl SiteSim {
    /// A simulation of the site over the year starting at `year_start_ms` whose last month
    /// starts at `last_month_start_ms` (ms since the epoch, UTC).
    pub fn new(
        params: SiteParams,
        rng: ChaCha8Rng,
        year_start_ms: i64,
        last_month_start_ms: i64,
    ) -> SiteSim {
        SiteSim {
            params,
            rng,
            weather: 0.0,
            room_offset: 0.0,
            last_ms: None,
            outage: [0, 0],
            year_start_ms,
            last_month_start_ms,
            fault: None,
        }
    }

    /// Injects the demo's fault: from `start_ms` to `end_ms` the site's condenser fouls
    /// quickly, so its COP falls linearly until the compressor draws [`FAULT_EXTRA`]
    /// more power for the same heat load, and stays there.
    pub fn with_fault(mut self, start_ms: i64, end_ms: i64) -> SiteSim {
        self.fault = Some((start_ms, end_ms));
        self
    }

    /// Appends the rows `first .. first + count` of a stretch sampled every `step_ms`
    /// milliseconds from `start_ms` to `out`.
    pub fn simulate(
        &mut self,
        start_ms: i64,
        step_ms: f64,
        first: u64,
        count: u64,
        out: &mut Rows,
    ) {
        for k in first..first + count {
            self.row(start_ms + (k as f64 * step_ms) as i64, out);
        }
    }

    /// Simulates one row at time `ms`.
    fn row(&mut self, ms: i64, out: &mut Rows) {
        let p = &self.params;
        let dt_h = self.last_ms.map_or(1.0, |l| (ms - l) as f64 / MS_PER_HOUR);
        self.last_ms = Some(ms);
        let hour_f = ms.rem_euclid(MS_PER_DAY) as f64 / MS_PER_HOUR;
        let hour = hour_f as i32;
        let day_of_year = (ms - self.year_start_ms) as f64 / MS_PER_DAY as f64;
        let two_pi = std::f64::consts::TAU;

        // Outdoor temperature: season + day-night cycle (peak 15:00) + slow weather
        // (Ornstein–Uhlenbeck, time constant two days) + the hot site's heat wave.
        let keep = (-dt_h / 48.0).exp();
        let shock: f64 = self.rng.sample(StandardNormal);
        self.weather = (self.weather * keep + 2.0 * (1.0 - keep * keep).sqrt() * shock)
            .clamp(-WEATHER_LIMIT, WEATHER_LIMIT);
        let season = p.season_amp * (two_pi * (day_of_year - p.season_peak) / 365.25).cos();
        let daily_cycle = (two_pi * (hour_f - 15.0) / 24.0).cos();
        let mut outdoor_temp = p.mean_temp + season + p.daily_amp * daily_cycle + self.weather;
        if p.hot && ms >= self.last_month_start_ms {
            // Heat wave: ramps up over three days, then holds at +14 K.
            let days_in = (ms - self.last_month_start_ms) as f64 / MS_PER_DAY as f64;
            outdoor_temp += 14.0 * (days_in / 3.0).min(1.0);
        }
        let outdoor_temp = outdoor_temp.clamp(-15.0, 48.0);
        let rh_noise: f64 = self.rng.sample(StandardNormal);
        let outdoor_rh = (p.mean_rh - 2.5 * p.daily_amp * daily_cycle - 1.5 * self.weather
            + 5.0 * rh_noise)
            .clamp(20.0, 100.0);

        // Operations: doors busy on weekday mornings; product moved with the traffic.
        let weekend = weekday(ms) >= 5;
        let profile = match hour {
            6..=11 => 22.0,
            12..=17 => 12.0,
            18..=21 => 5.0,
            _ => 1.0,
        } * if weekend { 0.4 } else { 1.0 };
        let door_noise: f64 = self.rng.sample(StandardNormal);
        let door_open_min = (profile * p.traffic * (0.35 * door_noise).exp()).clamp(0.0, 45.0);
        let load_noise: f64 = self.rng.sample(StandardNormal);
        let product_load_t = (door_open_min * 0.55 + 1.5 * load_noise).clamp(0.0, 30.0);
        let minute_of_day = hour_f * 60.0;
        let cycle_min = 1440.0 / f64::from(p.defrosts_per_day);
        let defrost = (minute_of_day % cycle_min) < p.defrost_min;

        // Room temperature lags doors, product and defrost (time constant 30 min).
        let target =
            (0.06 * door_open_min + 0.04 * product_load_t + if defrost { 1.5 } else { 0.0 })
                .min(3.0);
        let follow = 1.0 - (-dt_h / 0.5).exp();
        let room_noise: f64 = self.rng.sample(StandardNormal);
        self.room_offset += (target - self.room_offset) * follow;
        let room_temp = p.setpoint + (self.room_offset + 0.3 * room_noise).clamp(-3.0, 3.0);

        // Power: heat load / COP, capped, with noise and start-up spikes.
        let fouling = p.fouling * (day_of_year / 365.25).clamp(0.0, 1.0);
        let load = p.heat_load_kw(
            outdoor_temp,
            outdoor_rh,
            room_temp,
            door_open_min,
            product_load_t,
            defrost,
        );
        // The injected fault: efficiency lost gradually over its two weeks.
        let loss = match self.fault {
            Some((a, b)) if ms >= a => {
                1.0 + FAULT_EXTRA * ((ms - a) as f64 / (b - a) as f64).min(1.0)
            }
            _ => 1.0,
        };
        let power = (load * loss / p.cop(outdoor_temp, fouling)).min(p.capacity_kw);
        let noise: f64 = self.rng.sample(StandardNormal);
        let spike = if self.rng.random::<f64>() < 0.005 {
            1.0 + self.rng.random_range(0.3..0.8)
        } else {
            1.0
        };
        let compressor_kw = (power * (1.0 + 0.03 * noise) * spike).max(0.0);

        // Sensor dropouts: outages start in 0.6 % of rows and last 5 rows on average.
        let mut missing = [false; 2];
        for (sensor, left) in self.outage.iter_mut().enumerate() {
            if *left == 0 && self.rng.random::<f64>() < 0.006 {
                *left = self.rng.random_range(1..=9);
            }
            if *left > 0 {
                *left -= 1;
                missing[sensor] = true;
            }
        }

        out.ts.push(ms);
        out.outdoor_temp.push(outdoor_temp);
        out.outdoor_rh.push((!missing[0]).then_some(outdoor_rh));
        out.room_setpoint.push(p.setpoint);
        out.room_temp.push((!missing[1]).then_some(room_temp));
        out.door_open_min.push(door_open_min);
        out.product_load_t.push(product_load_t);
        out.defrost.push(i32::from(defrost));
        out.hour.push(hour);
        out.compressor_kw.push(compressor_kw);
    }
}
