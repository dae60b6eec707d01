//! Synthetic demonstrations: paths sampled from the soft-optimal policy of a known reward
//! (Ziebart, Maas, Bagnell & Dey, AAAI 2008), each for its own number of moves (Snoswell, Singh
//! & Ye 2020), so that a fit can be checked against the weights that made its demos.
//!
//! The draws come from [`SplitMix64`] in a fixed order, so a seed names the same demos
//! everywhere (the recovery test and `examples/irl_recovery.rs` share them): for each demo, one
//! draw for its number of moves T, one for its start, then one per move.

use super::{Features, Grid, IrlError, PathSample, invalid, soft_values};
use crate::rng::SplitMix64;
use std::ops::RangeInclusive;

/// `n` demos as state sequences, drawn from the soft-optimal policy of reward weights `w`
/// (standardised features, as [`Features::rewards`] takes them). Each demo takes T moves, T
/// uniform in `moves` (`lo + rng.below(hi − lo + 1)`), starts in a state uniform over the grid's
/// states (`rng.below(states)`), and makes each move t = 0 … T − 1 from π_{T−t}(· | sₜ) by
/// inverse transform: the first neighbour (in [`Grid::neighbours`] order) whose cumulative
/// probability exceeds one uniform draw `rng.next_f64()`, the last neighbour of positive
/// probability should rounding leave the draw above them all.
///
/// Refuses weights that do not match the features (`Invalid` on `weights`), an empty range
/// (`Invalid` on `moves`), a grid without states (`Invalid` on `grid`) and a value table over
/// [`super::MAX_VALUE_TABLE`] entries (`TooMuchWork`).
pub fn sample_states(
    grid: &Grid,
    features: &Features,
    w: &[f64],
    n: usize,
    moves: RangeInclusive<usize>,
    rng: &mut SplitMix64,
) -> Result<Vec<Vec<usize>>, IrlError> {
    if w.len() != features.len() {
        return Err(invalid(
            "weights",
            format!("{} weights for {} features", w.len(), features.len()),
        ));
    }
    let (lo, hi) = (*moves.start(), *moves.end());
    if lo > hi {
        return Err(invalid("moves", "the range is empty"));
    }
    if grid.states() == 0 {
        return Err(invalid("grid", "no states"));
    }
    let values = soft_values(grid, features, w, hi)?;
    let mut demos = Vec::with_capacity(n);
    for _ in 0..n {
        let horizon = lo + rng.below(hi - lo + 1);
        let mut s = rng.below(grid.states());
        let mut path = Vec::with_capacity(horizon + 1);
        path.push(s);
        for t in 0..horizon {
            let probs = values.policy(grid, horizon - t, s);
            let nb = grid.neighbours(s);
            let u = rng.next_f64();
            let mut acc = 0.0;
            let mut next = None;
            for (&q, &p) in nb.iter().zip(&probs) {
                acc += p;
                if u < acc {
                    next = Some(q as usize);
                    break;
                }
            }
            s = next.unwrap_or_else(|| {
                let last = probs.iter().rposition(|&p| p > 0.0).unwrap_or(0);
                nb[last] as usize
            });
            path.push(s);
        }
        demos.push(path);
    }
    Ok(demos)
}

/// [`sample_states`] as tracked paths: one sample per state at its cell centre
/// ([`Grid::state_centre`]), none lost. Read back with [`super::path_states`] (repeats kept),
/// they give the sampled states again.
pub fn sample_paths(
    grid: &Grid,
    features: &Features,
    w: &[f64],
    n: usize,
    moves: RangeInclusive<usize>,
    rng: &mut SplitMix64,
) -> Result<Vec<Vec<PathSample>>, IrlError> {
    Ok(sample_states(grid, features, w, n, moves, rng)?
        .iter()
        .map(|d| {
            d.iter()
                .map(|&s| {
                    let [x, y] = grid.state_centre(s);
                    PathSample { x, y, lost: false }
                })
                .collect()
        })
        .collect())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::irl::{Feature, GridSpec, path_states};

    fn scene() -> (Grid, Features) {
        let grid = Grid::new(&GridSpec {
            width: 60,
            height: 40,
            cell_px: 10,
            no_go: Vec::new(),
            remove_no_go: false,
        })
        .unwrap();
        let features = Features::new(&grid, &[Feature::DistanceTo { point: [55.0, 5.0] }]).unwrap();
        (grid, features)
    }

    /// Each demo has a number of moves in the range, moves only to neighbours, the same seed
    /// gives the same demos, and the paths read back as the states.
    #[test]
    fn samples_are_walks_of_the_grid() {
        let (grid, features) = scene();
        let a = sample_states(&grid, &features, &[-2.0], 30, 3..=7, &mut SplitMix64(9)).unwrap();
        let b = sample_paths(&grid, &features, &[-2.0], 30, 3..=7, &mut SplitMix64(9)).unwrap();
        assert_eq!(a.len(), 30);
        for (states, samples) in a.iter().zip(&b) {
            assert!((4..=8).contains(&states.len()));
            assert!(
                states
                    .windows(2)
                    .all(|p| grid.neighbours(p[0]).contains(&(p[1] as u32)))
            );
            assert_eq!(&path_states(&grid, samples, false, "d").unwrap(), states);
        }
        let fixed = sample_states(&grid, &features, &[-2.0], 5, 4..=4, &mut SplitMix64(1)).unwrap();
        assert!(fixed.iter().all(|d| d.len() == 5));
    }

    #[test]
    fn bad_requests_are_refused() {
        let (grid, features) = scene();
        let mut rng = SplitMix64(0);
        let field = |e: IrlError| match e {
            IrlError::Invalid { field, .. } => field,
            other => panic!("{other:?}"),
        };
        let e = sample_states(&grid, &features, &[1.0, 2.0], 1, 1..=2, &mut rng).unwrap_err();
        assert_eq!(field(e), "weights");
        #[allow(clippy::reversed_empty_ranges)]
        let e = sample_states(&grid, &features, &[1.0], 1, 3..=2, &mut rng).unwrap_err();
        assert_eq!(field(e), "moves");
    }
}
