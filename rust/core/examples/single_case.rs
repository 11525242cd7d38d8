//! Profiling driver for the optimiser's call: one reforming + shift case
//! solved again and again through `solve_batch` (fixed costs per call:
//! checks, the zero-pattern table, the plan, the kernel on one case).
//! `cargo run --release --example single_case [CALLS] [CASES]`.

use eqbatch_core::{solve_batch, BatchInputs, BatchOutputs, Phase, SolveOptions, System};
use std::time::Instant;

fn main() {
    let mut args = std::env::args().skip(1);
    let calls: usize = args.next().and_then(|a| a.parse().ok()).unwrap_or(200_000);
    let n: usize = args.next().and_then(|a| a.parse().ok()).unwrap_or(1);
    // CH4 H2O CO H2 CO2 N2
    let nu = vec![
        -1.0, -1.0, 1.0, 3.0, 0.0, 0.0, //
        0.0, -1.0, -1.0, 1.0, 1.0, 0.0,
    ];
    let system = System::new(nu, 2, 6, vec![Phase::Gas; 6], 1.01325).expect("valid system");
    let t = 900.0;
    let feed: Vec<f64> = (0..n)
        .flat_map(|_| [0.98, 2.94, 0.0, 0.0, 0.0, 0.02])
        .collect();
    let ln_k: Vec<f64> = (0..n)
        .flat_map(|_| [30.114 - 26830.0 / t, -4.036 + 4400.0 / t])
        .collect();
    let pressure = vec![20.0; n];
    let (mut amounts, mut extents) = (vec![0.0; 6 * n], vec![0.0; 2 * n]);
    let (mut status, mut iterations) = (vec![0u8; n], vec![0u32; n]);
    let options = SolveOptions::default();
    let inputs = BatchInputs {
        n_cases: n,
        feed: &feed,
        ln_k: &ln_k,
        pressure: &pressure,
        start: None,
    };
    let mut best = f64::INFINITY;
    for _ in 0..5 {
        let start = Instant::now();
        for _ in 0..calls / 5 {
            let mut outputs = BatchOutputs {
                amounts: &mut amounts,
                extents: &mut extents,
                mole_fractions: None,
                status: &mut status,
                iterations: &mut iterations,
                absent: None,
            };
            solve_batch(&system, &inputs, &mut outputs, &options, None).expect("batch");
        }
        best = best.min(start.elapsed().as_secs_f64() / (calls / 5) as f64);
    }
    println!(
        "{n} case(s) per call: {:.3} us per call (best of 5 blocks), status {}, {} iterations",
        best * 1e6,
        status[0],
        iterations[0]
    );
}
