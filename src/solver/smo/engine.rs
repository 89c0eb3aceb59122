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

use super::cache::{ActiveRows, RowCache, RowSource};
use super::rows::{Tiles, TILE};
use super::Selection;
use rayon::prelude::*;
use std::time::Instant;

/// Curvature used when `K_ii + K_jj − 2K_ij ≤ 0` (duplicated rows), as in Fan, Chen &
/// Lin (2005), eq. (17).
const TAU: f64 = 1e-12;

/// One dual variable: row and sign.
#[derive(Clone, Copy, Debug)]
struct Var {
    row: usize,
    plus: bool,
}

/// The outcome of a first pass over the active rows.
struct Extremes {
    /// `m(α)` and the variable reaching it.
    m: f64,
    i: Option<Var>,
    /// `M(α)` and the variable reaching it.
    big_m: f64,
    j: Option<Var>,
}

impl Extremes {
    fn new() -> Self {
        Extremes {
            m: f64::NEG_INFINITY,
            i: None,
            big_m: f64::INFINITY,
            j: None,
        }
    }

    /// Takes row `r` (with `g_r`, `α⁺_r`, `α⁻_r`) into account.
    #[inline(always)]
    fn visit(&mut self, r: usize, gr: f64, ap: f64, am: f64, c: f64, eps: f64) {
        let vp = -gr - eps;
        let vm = -gr + eps;
        if ap < c && vp > self.m {
            self.m = vp;
            self.i = Some(Var { row: r, plus: true });
        }
        if am > 0.0 && vm > self.m {
            self.m = vm;
            self.i = Some(Var {
                row: r,
                plus: false,
            });
        }
        if ap > 0.0 && vp < self.big_m {
            self.big_m = vp;
            self.j = Some(Var { row: r, plus: true });
        }
        if am < c && vm < self.big_m {
            self.big_m = vm;
            self.j = Some(Var {
                row: r,
                plus: false,
            });
        }
    }
}

/// Solver state; see the module documentation.
pub(super) struct Engine<'a> {
    src: RowSource<'a>,
    y: &'a [f64],
    c: f64,
    eps: f64,
    pub ap: Vec<f64>,
    pub am: Vec<f64>,
    pub beta: Vec<f64>,
    pub g: Vec<f64>,
    diag: Vec<f64>,
    active: ActiveRows,
    mask: Vec<bool>,
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
        let diag: Vec<f64> = (0..n).map(|r| src.value(r, r)).collect();
        Engine {
            y,
            c,
            eps,
            ap: vec![0.0; n],
            am: vec![0.0; n],
            beta: vec![0.0; n],
            g: y.iter().map(|v| -v).collect(),
            diag,
            active: ActiveRows {
                idx: (0..n).collect(),
                tiles: Tiles::new(src.d),
            },
            mask: vec![true; n],
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

    #[inline]
    fn value(&self, v: Var) -> f64 {
        if v.plus {
            -self.g[v.row] - self.eps
        } else {
            -self.g[v.row] + self.eps
        }
    }

    /// `m(α)`, `M(α)` and the variables reaching them, over the active rows.
    fn extremes(&self) -> Extremes {
        let mut e = Extremes::new();
        for &r in &self.active.idx {
            e.visit(r, self.g[r], self.ap[r], self.am[r], self.c, self.eps);
        }
        e
    }

    /// Second-order choice of `j` given `i` (Fan, Chen & Lin 2005, WSS2): among the
    /// down-movable variables with `v_t < m`, minimise `−(m − v_t)² / a_it`.
    fn second_order_j(&self, i: Var, m: f64, ki: &[f64]) -> Option<Var> {
        let (c, eps) = (self.c, self.eps);
        let kii = self.diag[i.row];
        let mut best = f64::INFINITY;
        let mut j = None;
        for &r in &self.active.idx {
            let a = kii + self.diag[r] - 2.0 * ki[r];
            let a = if a > 0.0 { a } else { TAU };
            if self.ap[r] > 0.0 {
                let b = m - (-self.g[r] - eps);
                if b > 0.0 {
                    let o = -b * b / a;
                    if o < best {
                        best = o;
                        j = Some(Var { row: r, plus: true });
                    }
                }
            }
            if self.am[r] < c {
                let b = m - (-self.g[r] + eps);
                if b > 0.0 {
                    let o = -b * b / a;
                    if o < best {
                        best = o;
                        j = Some(Var {
                            row: r,
                            plus: false,
                        });
                    }
                }
            }
        }
        j
    }

    /// Moves the pair `(i, j)` to the minimum of the objective on their segment and
    /// returns the extremes of the new point (found in the same pass as the gradient
    /// update).
    fn step(&mut self, i: Var, j: Var, si: usize) -> Extremes {
        let (ri, rj) = (i.row, j.row);
        let c = self.c;
        let ki_rj = self.cache.row(si)[rj];
        let b = self.value(i) - self.value(j);
        let a = self.diag[ri] + self.diag[rj] - 2.0 * ki_rj;
        let a = if a > 0.0 { a } else { TAU };
        let cap_i = if i.plus { c - self.ap[ri] } else { self.am[ri] };
        let cap_j = if j.plus { self.ap[rj] } else { c - self.am[rj] };
        let delta = (b / a).min(cap_i).min(cap_j);
        // Variables that reach a bound are set to it exactly.
        if i.plus {
            self.ap[ri] = if delta >= cap_i {
                c
            } else {
                (self.ap[ri] + delta).min(c)
            };
        } else {
            self.am[ri] = if delta >= cap_i {
                0.0
            } else {
                (self.am[ri] - delta).max(0.0)
            };
        }
        if j.plus {
            self.ap[rj] = if delta >= cap_j {
                0.0
            } else {
                (self.ap[rj] - delta).max(0.0)
            };
        } else {
            self.am[rj] = if delta >= cap_j {
                c
            } else {
                (self.am[rj] + delta).min(c)
            };
        }
        let db_i = (self.ap[ri] - self.am[ri]) - self.beta[ri];
        self.beta[ri] += db_i;
        if ri == rj {
            // α⁺ and α⁻ of one row fell together; β and hence g are unchanged.
            return self.extremes();
        }
        let db_j = (self.ap[rj] - self.am[rj]) - self.beta[rj];
        self.beta[rj] += db_j;
        let all = self.all_active();
        let sj = self.cache.fetch(rj, &self.src, &self.active, all);
        let (ki, kj) = (self.cache.row(si), self.cache.row(sj));
        let (c, eps) = (self.c, self.eps);
        let mut e = Extremes::new();
        for &r in &self.active.idx {
            let gr = self.g[r] + (db_i * ki[r] + db_j * kj[r]);
            self.g[r] = gr;
            e.visit(r, gr, self.ap[r], self.am[r], c, eps);
        }
        e
    }

    /// Recomputes `g` on the inactive rows from the support vectors and makes every row
    /// active again.
    pub fn reconstruct(&mut self) {
        if self.all_active() {
            return;
        }
        let t0 = Instant::now();
        let sv: Vec<usize> = (0..self.n()).filter(|&s| self.beta[s] != 0.0).collect();
        let inactive: Vec<usize> = (0..self.n()).filter(|&r| !self.mask[r]).collect();
        let mut sv_tiles = Tiles::new(self.src.d);
        sv_tiles.gather(self.src.x, sv.iter().copied());
        let sv_beta: Vec<f64> = sv.iter().map(|&s| self.beta[s]).collect();
        let mut fresh = vec![0.0; inactive.len()];
        let (src, y) = (&self.src, self.y);
        // Blocks of inactive rows in parallel, one kernel-row buffer per block; each
        // row's sum runs over the support vectors in increasing order.
        fresh
            .par_chunks_mut(TILE / 8)
            .zip(inactive.par_chunks(TILE / 8))
            .for_each(|(outs, rows)| {
                let mut k = vec![0.0; sv.len()];
                for (o, &r) in outs.iter_mut().zip(rows) {
                    sv_tiles.row_into_seq(&src.kernel, src.row(r), &mut k);
                    let mut acc = -y[r];
                    for (b, kv) in sv_beta.iter().zip(&k) {
                        acc += b * kv;
                    }
                    *o = acc;
                }
            });
        for (&r, v) in inactive.iter().zip(fresh) {
            self.g[r] = v;
        }
        self.extra_evaluations += (inactive.len() * sv.len()) as u64;
        self.extra_seconds += t0.elapsed().as_secs_f64();
        self.active.idx = (0..self.n()).collect();
        self.mask.iter_mut().for_each(|m| *m = true);
        self.cache.new_epoch();
    }

    /// Removes rows whose two variables sit at bounds and cannot form a violating pair
    /// (Fan, Chen & Lin 2005, §5.1, eq. 25–26).
    fn shrink(&mut self, m: f64, big_m: f64) {
        let (c, eps) = (self.c, self.eps);
        let can_go = |up: bool, down: bool, v: f64| -> bool {
            match (up, down) {
                (true, true) => false,
                (true, false) => v < big_m,
                (false, true) => v > m,
                (false, false) => true,
            }
        };
        let mut kept = Vec::with_capacity(self.active.idx.len());
        for &r in &self.active.idx {
            let vp = -self.g[r] - eps;
            let vm = -self.g[r] + eps;
            let plus_out = can_go(self.ap[r] < c, self.ap[r] > 0.0, vp);
            let minus_out = can_go(self.am[r] > 0.0, self.am[r] < c, vm);
            if plus_out && minus_out {
                self.mask[r] = false;
            } else {
                kept.push(r);
            }
        }
        if kept.len() < self.active.idx.len() {
            self.active.tiles.gather(self.src.x, kept.iter().copied());
        }
        self.active.idx = kept;
    }

    /// Iterates until `m − M ≤ tol` on all rows or `max_iterations` steps.
    pub fn run(
        &mut self,
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
                let e = self.extremes();
                if !unshrunk && e.m - e.big_m <= 10.0 * tol {
                    unshrunk = true;
                    self.reconstruct();
                }
                let e = self.extremes();
                self.shrink(e.m, e.big_m);
            }
            let e = match next.take() {
                Some(e) => e,
                None => self.extremes(),
            };
            let (i, first_j) = match (e.i, e.j) {
                (Some(i), Some(j)) if e.m - e.big_m > tol => (i, j),
                _ => {
                    if self.all_active() {
                        break true;
                    }
                    // Check again on every row, without shrinking first.
                    self.reconstruct();
                    countdown = shrink_every;
                    continue;
                }
            };
            if iterations >= max_iterations {
                break false;
            }
            let all = self.all_active();
            let si = self.cache.fetch(i.row, &self.src, &self.active, all);
            let j = match selection {
                Selection::FirstOrder => first_j,
                Selection::SecondOrder => self
                    .second_order_j(i, e.m, self.cache.row(si))
                    .unwrap_or(first_j),
            };
            next = Some(self.step(i, j, si));
            iterations += 1;
            countdown = countdown.saturating_sub(1);
        };
        self.reconstruct();
        Outcome {
            iterations,
            converged,
        }
    }

    /// `m(α) − M(α)` over all rows (call after [`Engine::reconstruct`]); zero when no
    /// pair of variables can move.
    pub fn gap_and_bias(&self) -> (f64, f64) {
        let e = self.extremes();
        let gap = if e.i.is_some() && e.j.is_some() {
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
