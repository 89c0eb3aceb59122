//! Shrinking and gradient reconstruction of the SMO iteration (Joachims, *Making
//! large-scale SVM learning practical*, 1999; Fan, Chen & Lin, JMLR 6, 2005, §5).

use std::time::Instant;

use super::super::rows::{Tiles, TILE};
use super::super::team::Crew;
use super::{Engine, SHRINK_SHARE};

impl Engine<'_> {
    /// Recomputes `g` on the inactive rows from the support vectors and makes every row
    /// active again.
    pub fn reconstruct(&mut self, crew: &Crew) {
        self.sync();
        if self.all_active() {
            return;
        }
        let t0 = Instant::now();
        let sv: Vec<usize> = (0..self.n()).filter(|&s| self.beta[s] != 0.0).collect();
        let inactive: Vec<usize> = (0..self.n()).filter(|&r| !self.active.mask[r]).collect();
        let mut sv_tiles = Tiles::new(self.src.d);
        sv_tiles.gather(self.src.x, sv.iter().copied());
        let sv_beta: Vec<f64> = sv.iter().map(|&s| self.beta[s]).collect();
        let mut fresh = vec![0.0; inactive.len()];
        let (src, y, beta, shift) = (&self.src, self.y, &self.beta, self.src.shift);
        // Blocks of inactive rows in parallel, one kernel-row buffer per block; each
        // row's sum runs over the support vectors in increasing order.
        const SPAN: usize = TILE / 8;
        crew.chunks_mut(&mut fresh, SPAN, |t, outs| {
            let rows = &inactive[t * SPAN..];
            let mut k = vec![0.0; sv.len()];
            for (o, &r) in outs.iter_mut().zip(rows) {
                sv_tiles.row_into_seq(&src.kernel, src.row(r), &mut k);
                let mut acc = -y[r];
                for (b, kv) in sv_beta.iter().zip(&k) {
                    acc += b * kv;
                }
                *o = acc + shift * beta[r];
            }
        });
        for (&r, v) in inactive.iter().zip(fresh) {
            self.g[r] = v;
        }
        self.extra_evaluations += (inactive.len() * sv.len()) as u64;
        self.extra_seconds += t0.elapsed().as_secs_f64();
        self.active.idx = (0..self.n()).collect();
        self.active.mask.iter_mut().for_each(|m| *m = true);
        self.act.g.clone_from(&self.g);
        self.act.ap.clone_from(&self.ap);
        self.act.am.clone_from(&self.am);
        self.act.diag.clone_from(&self.diag);
        self.cache.new_epoch();
    }

    /// Removes rows whose two variables sit at bounds and cannot form a violating pair
    /// (Fan, Chen & Lin 2005, §5.1, eq. 25–26).
    pub(super) fn shrink(&mut self, m: f64, big_m: f64) {
        let (c, eps) = (self.c, self.eps);
        let can_go = |up: bool, down: bool, v: f64| -> bool {
            match (up, down) {
                (true, true) => false,
                (true, false) => v < big_m,
                (false, true) => v > m,
                (false, false) => true,
            }
        };
        let keep: Vec<bool> = (0..self.active.idx.len())
            .map(|p| {
                let (g, ap, am) = (self.act.g[p], self.act.ap[p], self.act.am[p]);
                let plus_out = can_go(ap < c, ap > 0.0, -g - eps);
                let minus_out = can_go(am > 0.0, am < c, -g + eps);
                !(plus_out && minus_out)
            })
            .collect();
        // Each shrink makes cached kernel rows be compacted again when next used (an
        // O(active) pass each), so rows leave only in groups of at least an eighth of the
        // active set; the few that could leave earlier just stay in the scans.
        let leaving = keep.iter().filter(|&&k| !k).count();
        if leaving == 0 || leaving * SHRINK_SHARE < keep.len() {
            return;
        }
        self.sync();
        let filter = |v: &mut Vec<f64>| {
            let mut out = 0;
            for p in 0..keep.len() {
                if keep[p] {
                    v[out] = v[p];
                    out += 1;
                }
            }
            v.truncate(out);
        };
        filter(&mut self.act.g);
        filter(&mut self.act.ap);
        filter(&mut self.act.am);
        filter(&mut self.act.diag);
        let mut kept = Vec::with_capacity(self.act.g.len());
        for (p, &r) in self.active.idx.iter().enumerate() {
            if keep[p] {
                kept.push(r);
            } else {
                self.active.mask[r] = false;
            }
        }
        self.active.tiles.gather(self.src.x, kept.iter().copied());
        self.active.idx = kept;
        self.cache.shrunk(&self.active.idx);
    }
}
