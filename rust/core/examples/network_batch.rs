//! Profiling driver for larger networks: solves the cases in a file written by
//! `python -m bench.dump_network R N FILE` (the benchmark's workload (c)).
//! `cargo run --release --example network_batch FILE [THREADS]`.
//! With `HASH` set in the environment, also prints a checksum of every output.

mod common;

use eqbatch_core::{solve_batch, BatchInputs, BatchOutputs, Phase, SolveOptions, System};
use std::time::Instant;

fn main() {
    let mut args = std::env::args().skip(1);
    let path = args.next().expect("a file from bench.dump_network");
    let threads: Option<usize> = args.next().and_then(|a| a.parse().ok());
    let bytes = std::fs::read(&path).expect("readable file");
    let values: Vec<f64> = bytes
        .chunks_exact(8)
        .map(|b| f64::from_le_bytes(b.try_into().unwrap()))
        .collect();
    let (r, s, n) = (values[0] as usize, values[1] as usize, values[2] as usize);
    let mut at = 3;
    let mut take = |len: usize| {
        let part = values[at..at + len].to_vec();
        at += len;
        part
    };
    let nu = take(r * s);
    let feed = take(n * s);
    let ln_k = take(n * r);
    let pressure = take(n);
    let system = System::new(nu, r, s, vec![Phase::Gas; s], 1.0).expect("valid system");
    let mut amounts = vec![0.0; n * s];
    let mut extents = vec![0.0; n * r];
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
        mole_fractions: None,
        status: &mut status,
        iterations: &mut iterations,
        absent: None,
    };
    let start = Instant::now();
    solve_batch(
        &system,
        &inputs,
        &mut outputs,
        &SolveOptions::default(),
        threads,
    )
    .expect("batch");
    let secs = start.elapsed().as_secs_f64();
    let converged = status.iter().filter(|&&st| st == 0).count();
    let total_iter: u64 = iterations.iter().map(|&i| i as u64).sum();
    if std::env::var("HASH").is_ok() {
        let hash = common::checksum(&[&amounts, &extents], &status, &iterations);
        println!("checksum {hash:016x}");
    }
    println!(
        "{r} reactions, {s} species: {n} cases in {secs:.3} s: {:.2} us per case, {converged} converged, {:.2} iterations per case",
        1e6 * secs / n as f64,
        total_iter as f64 / n as f64
    );
}
