//! Invented demo data with a documented ground truth, for the examples only.
//!
//! **Lease defaults** (binary): a fictional equipment-leasing cooperative scores small-business lease
//! applications for default within 12 months. The true log-odds are
//!
//! ```text
//! z = b0 + 1.6 exp(-age / 2.5)                       young businesses default more (non-linear)
//!        + 2.2 max(0, lease / revenue - 0.35)         leverage above a threshold (hinge)
//!        - 0.018 (credit - 680)          credit score; a missing score adds 0.5 instead
//!        + 0.45 late_payments_24m
//!        - 0.7 min(collateral_cover, 1.5)
//!        + 1.5 [seasonal_business XOR term_months >= 48] - 0.75   interaction: no linear model fits it
//!        + equipment effect (construction +0.5, vehicle +0.3, agricultural +0.2, kitchen +0.1,
//!          office -0.2, medical -0.4) + region effect (+-0.15)
//! ```
//!
//! with b0 chosen by bisection so that about 15% of applications default; the label is drawn as
//! Bernoulli(sigmoid(z)). Revenue is missing for 5% of rows and the credit score for 8%.
//!
//! **Greenhouse yield** (regression): a fictional growers' cooperative predicts weekly tomato yield
//! per bed (kg) from light, temperature, humidity, irrigation, nutrient strength and variety:
//!
//! ```text
//! yield = 4 + 6 (1 - exp(-light / 6)) - 0.08 (temp - t_opt(variety))^2 + 0.9 ln(1 + irrigation / 20)
//!         - 0.05 |humidity - 70| + 0.6 ec - 0.12 ec^2 + week effect + N(0, 0.6^2)
//! ```
//!
//! where the optimal temperature depends on the variety (an interaction).

use arrow::array::{ArrayRef, BooleanArray, DictionaryArray, Float64Array, Int32Array, Int64Array, StringArray};
use arrow::datatypes::Int32Type;
use std::sync::Arc;

use crate::rng::{Purpose, Stream};

fn sigmoid(z: f64) -> f64 {
    1.0 / (1.0 + libm::exp(-z))
}

fn pick<'a>(s: &mut Stream, items: &[(&'a str, f64)]) -> &'a str {
    let total: f64 = items.iter().map(|(_, w)| w).sum();
    let mut u = s.uniform() * total;
    for (name, w) in items {
        if u < *w {
            return name;
        }
        u -= w;
    }
    items[items.len() - 1].0
}

fn poisson(s: &mut Stream, lambda: f64) -> i64 {
    let limit = libm::exp(-lambda);
    let mut k = 0;
    let mut p = s.uniform();
    while p > limit && k < 50 {
        k += 1;
        p *= s.uniform();
    }
    k
}

const EQUIPMENT: [(&str, f64, f64); 6] = [
    ("kitchen", 0.22, 0.1),
    ("medical", 0.12, -0.4),
    ("vehicle", 0.25, 0.3),
    ("construction", 0.16, 0.5),
    ("office", 0.17, -0.2),
    ("agricultural", 0.08, 0.2),
];
const REGIONS: [(&str, f64, f64); 5] = [
    ("north-coast", 0.24, -0.15),
    ("river-valley", 0.22, 0.0),
    ("high-plains", 0.18, 0.15),
    ("metro-east", 0.21, 0.05),
    ("metro-west", 0.15, -0.05),
];

/// The lease-default table: `rows` applications from seed `seed`.
pub fn lease_defaults(rows: usize, seed: u64) -> Vec<(String, ArrayRef)> {
    let mut s = Stream::new(seed, Purpose::DemoData);
    let mut id = Vec::with_capacity(rows);
    let (mut age, mut revenue, mut lease, mut term) = (Vec::new(), Vec::new(), Vec::new(), Vec::new());
    let (mut equipment, mut region, mut prior, mut late) = (Vec::new(), Vec::new(), Vec::new(), Vec::new());
    let (mut credit, mut collateral, mut seasonal, mut z_parts) = (Vec::new(), Vec::new(), Vec::new(), Vec::new());
    let eq_weights: Vec<(&str, f64)> = EQUIPMENT.iter().map(|(n, w, _)| (*n, *w)).collect();
    let rg_weights: Vec<(&str, f64)> = REGIONS.iter().map(|(n, w, _)| (*n, *w)).collect();
    for i in 0..rows {
        id.push(100_000 + i as i64 * 7 + (s.below(7) as i64));
        let a = (libm::exp(1.4 + 0.9 * s.normal())).clamp(0.2, 45.0);
        let rev = libm::exp(6.2 + 0.8 * s.normal()); // thousands
        let l = (rev * (0.05 + 0.4 * s.uniform()) * libm::exp(0.3 * s.normal())).max(2.0);
        let t = [12, 24, 36, 48, 60][s.below(5) as usize];
        let eq = pick(&mut s, &eq_weights);
        let rg = pick(&mut s, &rg_weights);
        let pr = poisson(&mut s, 1.2 + a.min(20.0) / 10.0);
        let lp = poisson(&mut s, 0.6);
        let cr = (680.0 + 60.0 * s.normal() - 12.0 * lp as f64).clamp(450.0, 850.0).round();
        let col = (0.2 + 1.3 * s.uniform()).min(1.8);
        let sea = s.uniform() < 0.3;
        let credit_missing = s.uniform() < 0.08;
        let revenue_missing = s.uniform() < 0.05;
        let eq_effect = EQUIPMENT.iter().find(|e| e.0 == eq).map_or(0.0, |e| e.2);
        let rg_effect = REGIONS.iter().find(|r| r.0 == rg).map_or(0.0, |r| r.2);
        let xor = (sea != (t >= 48)) as u8 as f64;
        let z = 1.6 * libm::exp(-a / 2.5)
            + 2.2 * (l / rev - 0.35).max(0.0)
            + if credit_missing { 0.5 } else { -0.018 * (cr - 680.0) }
            + 0.45 * lp as f64
            - 0.7 * col.min(1.5)
            + 1.5 * xor
            - 0.75
            + eq_effect
            + rg_effect;
        z_parts.push(z);
        age.push((a * 10.0).round() / 10.0);
        revenue.push((!revenue_missing).then_some((rev * 10.0).round() / 10.0));
        lease.push((l * 10.0).round() / 10.0);
        term.push(t);
        equipment.push(eq);
        region.push(rg);
        prior.push(pr);
        late.push(lp);
        credit.push((!credit_missing).then_some(cr));
        collateral.push((col * 100.0).round() / 100.0);
        seasonal.push(sea);
    }
    // Intercept so that the mean default probability is 15%.
    let (mut lo, mut hi) = (-10.0, 5.0);
    for _ in 0..60 {
        let mid = (lo + hi) / 2.0;
        let mean = z_parts.iter().map(|z| sigmoid(z + mid)).sum::<f64>() / rows.max(1) as f64;
        if mean < 0.15 {
            lo = mid
        } else {
            hi = mid
        }
    }
    let b0 = (lo + hi) / 2.0;
    let defaulted: Vec<bool> = z_parts.iter().map(|z| s.uniform() < sigmoid(z + b0)).collect();
    let region_dict: DictionaryArray<Int32Type> = region.into_iter().collect();
    vec![
        ("application_id".into(), Arc::new(Int64Array::from(id)) as ArrayRef),
        ("business_age_years".into(), Arc::new(Float64Array::from(age))),
        ("annual_revenue_k".into(), Arc::new(Float64Array::from(revenue))),
        ("lease_amount_k".into(), Arc::new(Float64Array::from(lease))),
        ("term_months".into(), Arc::new(Int32Array::from(term))),
        ("equipment_type".into(), Arc::new(StringArray::from(equipment))),
        ("region".into(), Arc::new(region_dict)),
        ("prior_leases".into(), Arc::new(Int64Array::from(prior))),
        ("late_payments_24m".into(), Arc::new(Int64Array::from(late))),
        ("owner_credit_score".into(), Arc::new(Float64Array::from(credit))),
        ("collateral_cover".into(), Arc::new(Float64Array::from(collateral))),
        ("seasonal_business".into(), Arc::new(BooleanArray::from(seasonal))),
        ("defaulted_12m".into(), Arc::new(BooleanArray::from(defaulted))),
    ]
}

const VARIETIES: [(&str, f64); 4] = [("cherry-red", 24.0), ("beefsteak", 22.0), ("plum-san", 25.5), ("heritage-gold", 21.0)];

/// The greenhouse-yield table: `rows` bed-weeks from seed `seed`.
pub fn greenhouse_yield(rows: usize, seed: u64) -> Vec<(String, ArrayRef)> {
    let mut s = Stream::new(seed.wrapping_add(1), Purpose::DemoData);
    let (mut bed, mut variety, mut light, mut temp) = (Vec::new(), Vec::new(), Vec::new(), Vec::new());
    let (mut humidity, mut irrigation, mut ec, mut week, mut yield_kg) = (Vec::new(), Vec::new(), Vec::new(), Vec::new(), Vec::new());
    for i in 0..rows {
        let v = VARIETIES[s.below(4) as usize];
        let w = 1 + s.below(30) as i32;
        let li = (4.0 + 10.0 * s.uniform()).min(16.0);
        let te = 17.0 + 12.0 * s.uniform();
        let hu = 50.0 + 40.0 * s.uniform();
        let ir = 5.0 + 60.0 * s.uniform();
        let e = 1.0 + 3.5 * s.uniform();
        let season = 0.8 * libm::sin(std::f64::consts::PI * w as f64 / 30.0);
        let y = 4.0 + 6.0 * (1.0 - libm::exp(-li / 6.0)) - 0.08 * (te - v.1).powi(2) + 0.9 * libm::log(1.0 + ir / 20.0)
            - 0.05 * (hu - 70.0).abs()
            + 0.6 * e
            - 0.12 * e * e
            + season
            + 0.6 * s.normal();
        bed.push(format!("bed-{:03}", i % 240));
        variety.push(v.0);
        light.push((li * 10.0).round() / 10.0);
        temp.push((te * 10.0).round() / 10.0);
        humidity.push((s.uniform() >= 0.03).then_some(hu.round()));
        irrigation.push((ir * 10.0).round() / 10.0);
        ec.push((e * 100.0).round() / 100.0);
        week.push(w);
        yield_kg.push((y.max(0.0) * 100.0).round() / 100.0);
    }
    vec![
        ("bed_id".into(), Arc::new(StringArray::from(bed)) as ArrayRef),
        ("variety".into(), Arc::new(StringArray::from(variety))),
        ("light_hours".into(), Arc::new(Float64Array::from(light))),
        ("air_temp_c".into(), Arc::new(Float64Array::from(temp))),
        ("humidity_pct".into(), Arc::new(Float64Array::from(humidity))),
        ("irrigation_l".into(), Arc::new(Float64Array::from(irrigation))),
        ("nutrient_ec".into(), Arc::new(Float64Array::from(ec))),
        ("week_of_season".into(), Arc::new(Int32Array::from(week))),
        ("yield_kg".into(), Arc::new(Float64Array::from(yield_kg))),
    ]
}
