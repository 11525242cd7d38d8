//! Profiling driver: one million steam-reforming + shift cases, as in the
//! benchmark's workload (a). `cargo run --release --example reforming_batch [N] [THREADS]`.
//! With `HASH` set in the environment, also prints a checksum of every output.

mod common;

use eqbatch_core::{solve_batch, BatchInputs, BatchOutputs, Phase, SolveOptions, System};
use std::time::Instant;

fn main() {
    let mut args = std::env::args().skip(1);
    let n: usize = args
        .next()
        .and_then(|a| a.parse().ok())
        .unwrap_or(1_000_000);
    let threads: Option<usize> = args.next().and_then(|a| a.parse().ok());
    // CH4 H2O CO H2 CO2 N2
    let nu = vec![
        -1.0, -1.0, 1.0, 3.0, 0.0, 0.0, //
        0.0, -1.0, -1.0, 1.0, 1.0, 0.0,
    ];
    let system = System::new(nu, 2, 6, vec![Phase::Gas; 6], 1.01325).expect("valid system");
    // A simple deterministic generator (no dependencies): a Weyl sequence.
    let mut feed = Vec::with_capacity(n * 6);
    let mut ln_k = Vec::with_capacity(n * 2);
    let mut pressure = Vec::with_capacity(n);
    for k in 0..n {
        let u = |m: f64| ((k as f64 + 0.5) * m).fract();
        let t = 700.0 + 500.0 * u(0.618_033_988_7);
        let p = 1.0 + 39.0 * u(0.754_877_666_2);
        let s2c = 1.5 + 3.5 * u(0.569_840_290_9);
        feed.extend([0.98, 0.98 * s2c, 0.0, 0.0, 0.0, 0.02]);
        ln_k.extend([30.114 - 26830.0 / t, -4.036 + 4400.0 / t]);
        pressure.push(p);
    }
    let mut amounts = vec![0.0; n * 6];
    let mut extents = vec![0.0; n * 2];
    let mut fractions = vec![0.0; n * 6];
    let mut status = vec![0u8; n];
    let mut iterations = vec![0u32; n];
    let inputs = BatchInputs {
        n_cases: n,
        feed: &feed,
        ln_k: &ln_k,
        pressure: &pressure,
        start: None,
    };
    let mut outputs = BatchOutputs {
        amounts: &mut amounts,
        extents: &mut extents,
        mole_fractions: Some(&mut fractions),
        status: &mut status,
        iterations: &mut iterations,
        absent: None,
    };
    let start = Instant::now();
    // CHAIN=1 in the environment: chained starts (each case from its predecessor).
    let options = SolveOptions {
        chain: std::env::var("CHAIN").is_ok(),
        ..SolveOptions::default()
    };
    solve_batch(&system, &inputs, &mut outputs, &options, threads).expect("batch");
    let secs = start.elapsed().as_secs_f64();
    let converged = status.iter().filter(|&&s| s == 0).count();
    let total_iter: u64 = iterations.iter().map(|&i| i as u64).sum();
    if std::env::var("HIST").is_ok() {
        let mut hist = [0usize; 64];
        for &i in &iterations {
            hist[(i as usize).min(63)] += 1;
        }
        println!(
            "iterations histogram: {:?}",
            &hist[..hist.iter().rposition(|&c| c > 0).unwrap_or(0) + 1]
        );
    }
    if std::env::var("HASH").is_ok() {
        let hash = common::checksum(&[&amounts, &extents, &fractions], &status, &iterations);
        println!("checksum {hash:016x}");
    }
    println!(
        "{n} cases in {secs:.3} s: {:.0} cases/s, {converged} converged, {:.2} iterations per case",
        n as f64 / secs,
        total_iter as f64 / n as f64
    );
}
