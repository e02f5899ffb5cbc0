//! Which areas of a map are neighbours: queen contiguity (their boundaries
//! share at least one point) or rook contiguity (they share a stretch of
//! boundary), from the areas' polygon rings. Boundaries drawn from one
//! topology share their vertices exactly, so a shared point is a shared
//! vertex and a shared stretch a shared edge (in either direction); both are
//! found by hashing vertices and edges, in time linear in the vertices.
//! Pure geometry: no files, no formats.

use std::collections::HashMap;

/// A point of a ring: (x, y), longitude and latitude or projected.
pub type Point = [f64; 2];

/// How neighbours are decided.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Contiguity {
    /// Boundaries that share at least one point.
    Queen,
    /// Boundaries that share at least one edge.
    Rook,
}

/// A point by its exact bits.
type PointKey = (u64, u64);

/// A vertex (both ends the same point) or an edge (its ends in order).
type Stretch = (PointKey, PointKey);

/// A point's exact key (−0 and 0 are one point).
fn key(point: &Point) -> PointKey {
    let bits = |v: f64| if v == 0.0 { 0 } else { v.to_bits() };
    (bits(point[0]), bits(point[1]))
}

/// The pairs (a, b), a < b, of areas that are neighbours, sorted. `areas[i]`
/// holds area i's rings (outer boundaries and holes alike, each closed or
/// not).
pub fn neighbour_pairs(areas: &[Vec<Vec<Point>>], rule: Contiguity) -> Vec<(u32, u32)> {
    // Each vertex (queen) or edge (rook) with the areas it bounds.
    let mut touching: HashMap<Stretch, Vec<u32>> = HashMap::new();
    for (area, rings) in areas.iter().enumerate() {
        for ring in rings {
            for (i, point) in ring.iter().enumerate() {
                let here = key(point);
                let entry = match rule {
                    Contiguity::Queen => (here, here),
                    Contiguity::Rook => {
                        let next = key(&ring[(i + 1) % ring.len()]);
                        if next == here {
                            continue; // the closing point repeats the first, or a repeated vertex
                        }
                        (here.min(next), here.max(next))
                    }
                };
                let list = touching.entry(entry).or_default();
                if list.last() != Some(&(area as u32)) {
                    list.push(area as u32);
                }
            }
        }
    }
    let mut pairs: Vec<(u32, u32)> = Vec::new();
    for list in touching.values_mut() {
        list.sort_unstable();
        list.dedup();
        for (i, &a) in list.iter().enumerate() {
            pairs.extend(list[i + 1..].iter().map(|&b| (a, b)));
        }
    }
    pairs.sort_unstable();
    pairs.dedup();
    pairs
}

#[cfg(test)]
mod tests {
    use super::*;

    fn square(x: f64, y: f64) -> Vec<Vec<Point>> {
        vec![vec![[x, y], [x + 1.0, y], [x + 1.0, y + 1.0], [x, y + 1.0], [x, y]]]
    }

    #[test]
    fn a_three_by_three_grid_has_the_usual_neighbours() {
        // Areas numbered row by row: the centre (4) touches all eight, the corners three (queen) or two (rook).
        let areas: Vec<_> = (0..9).map(|i| square((i % 3) as f64, (i / 3) as f64)).collect();
        let queen = neighbour_pairs(&areas, Contiguity::Queen);
        let rook = neighbour_pairs(&areas, Contiguity::Rook);
        assert_eq!(queen.len(), 20, "12 shared edges and 8 diagonal touches");
        assert_eq!(rook.len(), 12);
        let around =
            |pairs: &[(u32, u32)], area: u32| pairs.iter().filter(|(a, b)| *a == area || *b == area).count();
        assert_eq!((around(&queen, 4), around(&rook, 4)), (8, 4));
        assert_eq!((around(&queen, 0), around(&rook, 0)), (3, 2));
        assert!(queen.contains(&(0, 4)) && !rook.contains(&(0, 4)), "a corner touch is queen only");
    }

    #[test]
    fn an_island_has_no_neighbours_and_a_hole_counts_as_boundary() {
        // Area 1 fills a hole of area 0; area 2 is far away.
        let mut ring_with_hole = square(0.0, 0.0);
        ring_with_hole[0] = vec![[0.0, 0.0], [3.0, 0.0], [3.0, 3.0], [0.0, 3.0]];
        ring_with_hole.push(vec![[1.0, 1.0], [2.0, 1.0], [2.0, 2.0], [1.0, 2.0]]);
        let areas = vec![ring_with_hole, square(1.0, 1.0), square(10.0, 10.0)];
        assert_eq!(neighbour_pairs(&areas, Contiguity::Rook), vec![(0, 1)]);
        assert_eq!(neighbour_pairs(&areas, Contiguity::Queen), vec![(0, 1)]);
    }
}
