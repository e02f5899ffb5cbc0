//! What the neighbour prior's two computations cost at the scale,
//! 100,000 areas with 6 neighbours each: finding the neighbours of a map's
//! areas (`core::contiguity`, a 250 x 400 grid of hexagons built here as the
//! demo map is, integer corners scaled) and every area's local prior from its
//! neighbourhood (`core::model::neighbourhood`, invented counts, fixed seed).
//!
//! `cargo bench --bench neighbours`

use criterion::{criterion_group, criterion_main, Criterion};
use ratepool::core::contiguity::{neighbour_pairs, Contiguity, Point};
use ratepool::core::model::neighbourhood::{local_priors, Neighbourhoods};

mod common;
use common::SplitMix;

/// A `columns` x `rows` grid of pointy-top hexagons, odd rows shifted.
fn hexagons(columns: i64, rows: i64) -> Vec<Vec<Vec<Point>>> {
    let corners = [(0, 2), (1, 1), (1, -1), (0, -2), (-1, -1), (-1, 1)];
    let (unit_x, unit_y) = (4.0 * 3f64.sqrt() / 2.0, 2.0);
    (0..rows)
        .flat_map(|row| (0..columns).map(move |col| (col, row)))
        .map(|(col, row)| {
            let (cx, cy) = (2 * col + (row & 1), 3 * row);
            let mut ring: Vec<Point> = corners
                .iter()
                .map(|(dx, dy)| [(cx + dx) as f64 * unit_x, (cy + dy) as f64 * unit_y])
                .collect();
            ring.push(ring[0]);
            vec![ring]
        })
        .collect()
}

fn neighbours(c: &mut Criterion) {
    let map = hexagons(250, 400);
    let pairs = neighbour_pairs(&map, Contiguity::Queen);
    let areas = map.len();
    let mut rng = SplitMix(20261210);
    let exposure: Vec<f64> = (0..areas).map(|_| 1.0 + 40.0 * rng.unit()).collect();
    let events: Vec<f64> = exposure.iter().map(|e| (e * (0.5 + rng.unit())).round()).collect();
    let hoods = Neighbourhoods::from_pairs(areas, pairs.iter().copied());
    let mut group = c.benchmark_group("100,000 areas, 6 neighbours each");
    group.sample_size(10);
    group.bench_function("queen neighbours of the map", |b| {
        b.iter(|| neighbour_pairs(&map, Contiguity::Queen))
    });
    group.bench_function("the relation from the pairs", |b| {
        b.iter(|| Neighbourhoods::from_pairs(areas, pairs.iter().copied()))
    });
    group.bench_function("local priors", |b| b.iter(|| local_priors(&events, &exposure, &hoods)));
    group.finish();
}

criterion_group!(benches, neighbours);
criterion_main!(benches);
