//! The SMO iteration for the epsilon-SVR dual (Platt, *Sequential minimal optimization*,
//! Microsoft Research TR-98-14, 1998), with the working-set selections of Fan, Chen &
//! Lin (JMLR 6, 2005): second order (their WSS2) or the maximal violating pair, and
//! shrinking with gradient reconstruction (Joachims 1999; Fan, Chen & Lin 2005, §5).
//!
//! # Formulation
//! The 2n dual variables are `α⁺_r, α⁻_r ∈ [0, C]` with signs `+1` / `−1`; the problem
//! is `min ½ βᵀKβ + ε Σ(α⁺+α⁻) − yᵀβ` subject to `Σ β = 0`, where `β = α⁺ − α⁻`.
//! Every quantity the method needs is a function of the n-vector `g = Kβ − y`: the
//! gradient is `g_r + ε` for `α⁺_r` and `−g_r + ε` for `α⁻_r`, and the "value"
//! `−sign·gradient` is `v⁺_r = −g_r − ε` and `v⁻_r = −g_r + ε`. A variable can move
//! up (`α⁺ < C` or `α⁻ > 0`) or down (`α⁺ > 0` or `α⁻ < C`);
//! `m = max over up of v`, `M = min over down of v`, and the point is optimal within
//! `tol` when `m − M ≤ tol`. A step moves `β_i` by `+δ` and `β_j` by `−δ`, so `g`
//! changes by `δ (K_i − K_j)`.
//!
//! The squared loss is the same problem with `K + I/(2C)` in place of `K` and no upper
//! bound on the α (Ho & Lin, JMLR 13, 2012, §2, for the linear case): the kernel rows
//! carry the diagonal shift (`cache.rs`) and the bound `c` is infinite, so the
//! selection and the steps are unchanged.

use super::cache::{ActiveRows, RowCache, RowSource};
use super::rows::Tiles;
use super::scan::{self, Extremes, Second, Update, View, NONE};
use super::team::Crew;
use super::Selection;
use std::time::Instant;

mod shrink;

/// Curvature used when `K_ii + K_jj − 2K_ij ≤ 0` (duplicated rows), as in Fan, Chen &
/// Lin (2005), eq. (17).
const TAU: f64 = 1e-12;

/// A shrink happens when at least `1/SHRINK_SHARE` of the active rows can leave.
const SHRINK_SHARE: usize = 8;

/// One dual variable: position among the active rows and sign.
#[derive(Clone, Copy, Debug)]
struct Var {
    pos: usize,
    plus: bool,
}

impl Var {
    /// From a code of `scan` (`2·position + 1` for `α⁻`).
    fn from_code(code: u64) -> Option<Var> {
        (code != NONE).then_some(Var {
            pos: (code / 2) as usize,
            plus: code.is_multiple_of(2),
        })
    }
}

/// The state of the active rows, stored contiguously in the order of `ActiveRows::idx`
/// (the passes over them dominate an iteration; see `scan.rs`).
struct Compact {
    g: Vec<f64>,
    ap: Vec<f64>,
    am: Vec<f64>,
    diag: Vec<f64>,
}

impl Compact {
    /// The gradient, for a pass to update, and the state of the bounds it reads,
    /// borrowed together.
    fn gradient_and_view(&mut self, c: f64, eps: f64) -> (&mut [f64], View<'_>) {
        let view = View {
            ap: &self.ap,
            am: &self.am,
            c,
            eps,
        };
        (&mut self.g, view)
    }
}

/// Solver state; see the module documentation. The per-row vectors `ap`, `am`, `g` are
/// indexed by training row and are current for the inactive rows; those of the active
/// rows live in `act` and are written back by [`Engine::sync`].
pub(super) struct Engine<'a> {
    src: RowSource<'a>,
    y: &'a [f64],
    /// Upper bound of every α: C for the linear loss, +∞ for the squared loss.
    c: f64,
    eps: f64,
    pub ap: Vec<f64>,
    pub am: Vec<f64>,
    pub beta: Vec<f64>,
    pub g: Vec<f64>,
    diag: Vec<f64>,
    active: ActiveRows,
    act: Compact,
    pub cache: RowCache,
    /// Kernel values computed outside the cache (diagonal, gradient reconstruction).
    pub extra_evaluations: u64,
    /// Seconds spent computing those.
    pub extra_seconds: f64,
}

/// What [`Engine::run`] reports.
pub(super) struct Outcome {
    pub iterations: u64,
    pub converged: bool,
}

impl<'a> Engine<'a> {
    pub fn new(src: RowSource<'a>, y: &'a [f64], c: f64, eps: f64, cache_rows: usize) -> Self {
        let n = src.n;
        let t0 = Instant::now();
        let diag: Vec<f64> = (0..n).map(|r| src.diagonal(r)).collect();
        let g: Vec<f64> = y.iter().map(|v| -v).collect();
        Engine {
            y,
            c,
            eps,
            ap: vec![0.0; n],
            am: vec![0.0; n],
            beta: vec![0.0; n],
            act: Compact {
                g: g.clone(),
                ap: vec![0.0; n],
                am: vec![0.0; n],
                diag: diag.clone(),
            },
            g,
            diag,
            active: ActiveRows {
                idx: (0..n).collect(),
                mask: vec![true; n],
                tiles: Tiles::new(src.d),
            },
            cache: RowCache::new(n, cache_rows),
            extra_evaluations: n as u64,
            extra_seconds: t0.elapsed().as_secs_f64(),
            src,
        }
    }

    fn n(&self) -> usize {
        self.src.n
    }

    fn all_active(&self) -> bool {
        self.active.idx.len() == self.n()
    }

    fn view(&self) -> View<'_> {
        View {
            ap: &self.act.ap,
            am: &self.act.am,
            c: self.c,
            eps: self.eps,
        }
    }

    #[inline]
    fn value(&self, v: Var) -> f64 {
        if v.plus {
            -self.act.g[v.pos] - self.eps
        } else {
            -self.act.g[v.pos] + self.eps
        }
    }

    /// `m(α)`, `M(α)` and the variables reaching them, over the active rows.
    fn extremes(&mut self, crew: &Crew) -> Extremes {
        let (g, view) = self.act.gradient_and_view(self.c, self.eps);
        scan::extremes(crew, g, None, &view)
    }

    /// Writes the active rows' state back to the per-row vectors.
    fn sync(&mut self) {
        for (p, &r) in self.active.idx.iter().enumerate() {
            self.g[r] = self.act.g[p];
            self.ap[r] = self.act.ap[p];
            self.am[r] = self.act.am[p];
        }
    }

    /// Moves the pair `(i, j)` to the minimum of the objective on their segment and
    /// returns the extremes of the new point (found in the same pass as the gradient
    /// update).
    fn step(&mut self, i: Var, j: Var, si: usize, crew: &Crew) -> Extremes {
        let (pi, pj) = (i.pos, j.pos);
        let (ri, rj) = (self.active.idx[pi], self.active.idx[pj]);
        let c = self.c;
        let ki_j = self.cache.row(si)[pj];
        let b = self.value(i) - self.value(j);
        let a = self.act.diag[pi] + self.act.diag[pj] - 2.0 * ki_j;
        let a = if a > 0.0 { a } else { TAU };
        let (ap, am) = (&mut self.act.ap, &mut self.act.am);
        let cap_i = if i.plus { c - ap[pi] } else { am[pi] };
        let cap_j = if j.plus { ap[pj] } else { c - am[pj] };
        let delta = (b / a).min(cap_i).min(cap_j);
        // Variables that reach a bound are set to it exactly.
        if i.plus {
            ap[pi] = if delta >= cap_i {
                c
            } else {
                (ap[pi] + delta).min(c)
            };
        } else {
            am[pi] = if delta >= cap_i {
                0.0
            } else {
                (am[pi] - delta).max(0.0)
            };
        }
        if j.plus {
            ap[pj] = if delta >= cap_j {
                0.0
            } else {
                (ap[pj] - delta).max(0.0)
            };
        } else {
            am[pj] = if delta >= cap_j {
                c
            } else {
                (am[pj] + delta).min(c)
            };
        }
        let db_i = (ap[pi] - am[pi]) - self.beta[ri];
        let beta_j = ap[pj] - am[pj];
        self.beta[ri] += db_i;
        if ri == rj {
            // α⁺ and α⁻ of one row fell together; β and hence g are unchanged.
            return self.extremes(crew);
        }
        let db_j = beta_j - self.beta[rj];
        self.beta[rj] += db_j;
        let sj = self.cache.fetch(rj, &self.src, &self.active, crew);
        let (ki, kj) = (self.cache.row(si), self.cache.row(sj));
        let update = Update {
            ki,
            kj,
            di: db_i,
            dj: db_j,
        };
        let (g, view) = self.act.gradient_and_view(c, self.eps);
        scan::extremes(crew, g, Some(update), &view)
    }

    /// Iterates until `m − M ≤ tol` on all rows or `max_iterations` steps.
    pub fn run(
        &mut self,
        crew: &Crew,
        tol: f64,
        max_iterations: u64,
        shrinking: bool,
        selection: Selection,
    ) -> Outcome {
        let shrink_every = self.n().clamp(1, 1000) as u64;
        let mut countdown = shrink_every;
        let mut unshrunk = false;
        let mut iterations = 0u64;
        // Extremes of the current point when the last step already found them.
        let mut next: Option<Extremes> = None;
        let converged = loop {
            if shrinking && countdown == 0 {
                countdown = shrink_every;
                next = None;
                let e = self.extremes(crew);
                if !unshrunk && e.m - e.big_m <= 10.0 * tol {
                    unshrunk = true;
                    self.reconstruct(crew);
                }
                let e = self.extremes(crew);
                self.shrink(e.m, e.big_m);
            }
            let e = match next.take() {
                Some(e) => e,
                None => self.extremes(crew),
            };
            let (i, first_j) = match (Var::from_code(e.i), Var::from_code(e.j)) {
                (Some(i), Some(j)) if e.m - e.big_m > tol => (i, j),
                _ => {
                    if self.all_active() {
                        break true;
                    }
                    // Check again on every row, without shrinking first.
                    self.reconstruct(crew);
                    countdown = shrink_every;
                    continue;
                }
            };
            if iterations >= max_iterations {
                break false;
            }
            let si = self
                .cache
                .fetch(self.active.idx[i.pos], &self.src, &self.active, crew);
            let j = match selection {
                Selection::FirstOrder => first_j,
                Selection::SecondOrder => {
                    let second = Second {
                        diag: &self.act.diag,
                        ki: self.cache.row(si),
                        kii: self.act.diag[i.pos],
                        m: e.m,
                        tau: TAU,
                    };
                    let code = scan::wss2(crew, &self.act.g, &second, &self.view());
                    Var::from_code(code).unwrap_or(first_j)
                }
            };
            next = Some(self.step(i, j, si, crew));
            iterations += 1;
            countdown = countdown.saturating_sub(1);
        };
        self.reconstruct(crew);
        Outcome {
            iterations,
            converged,
        }
    }

    /// `m(α) − M(α)` over all rows (call after [`Engine::reconstruct`]); zero when no
    /// pair of variables can move.
    pub fn gap_and_bias(&mut self, crew: &Crew) -> (f64, f64) {
        let e = self.extremes(crew);
        let gap = if e.i != NONE && e.j != NONE {
            (e.m - e.big_m).max(0.0)
        } else {
            0.0
        };
        // Bias: average of the values of the free variables, else the midpoint of the
        // interval [M, m] allowed by the bounded ones (common practice).
        let (c, eps) = (self.c, self.eps);
        let (mut sum, mut count) = (0.0, 0usize);
        for r in 0..self.n() {
            if self.ap[r] > 0.0 && self.ap[r] < c {
                sum += -self.g[r] - eps;
                count += 1;
            }
            if self.am[r] > 0.0 && self.am[r] < c {
                sum += -self.g[r] + eps;
                count += 1;
            }
        }
        let bias = if count > 0 {
            sum / count as f64
        } else {
            match (e.m.is_finite(), e.big_m.is_finite()) {
                (true, true) => 0.5 * (e.m + e.big_m),
                (true, false) => e.m,
                (false, true) => e.big_m,
                (false, false) => 0.0,
            }
        };
        (gap, bias)
    }

    /// The dual objective `½ βᵀKβ − yᵀβ + ε Σ(α⁺+α⁻) = ½ Σ β(g − y) + ε Σ(α⁺+α⁻)`.
    pub fn objective(&self) -> f64 {
        let mut quad = 0.0;
        let mut l1 = 0.0;
        for r in 0..self.n() {
            quad += self.beta[r] * (self.g[r] - self.y[r]);
            l1 += self.ap[r] + self.am[r];
        }
        0.5 * quad + self.eps * l1
    }
}
