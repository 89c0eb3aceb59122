//! The passes of `scan.rs` split over the crew in parts of whole lane groups, the
//! parts' results merged in the order of one sequential scan.

use super::super::team::Crew;
#[cfg(test)]
use super::reference;
use super::{
    better, extremes_part, wss2_part, Extremes, Second, Update, View, LANES, MIN_PART, NONE,
};

/// Parts a pass over `n` positions is split into on `crew`: one per thread, each of at
/// least [`MIN_PART`] positions.
fn parts(crew: &Crew, n: usize) -> usize {
    crew.threads().min(n / MIN_PART).max(1)
}

/// Positions per part when `n` positions go into `parts` parts (whole lane groups).
fn span(n: usize, parts: usize) -> usize {
    n.div_ceil(parts).next_multiple_of(LANES).max(LANES)
}

/// `m(α)`, `M(α)` and their variables, after the gradient update when there is one,
/// split over the crew when long.
pub(in crate::solver::smo) fn extremes(
    crew: &Crew,
    g: &mut [f64],
    update: Option<Update>,
    s: &View,
) -> Extremes {
    #[cfg(test)]
    let before = g.to_vec();
    let e = extremes_split(crew, parts(crew, g.len()), g, update, s);
    #[cfg(test)]
    reference::check_extremes(&before, g, update.as_ref(), s, &e);
    e
}

/// [`extremes`] in `parts` parts of whole lane groups, the parts' results merged in the
/// order of one sequential scan.
pub(super) fn extremes_split(
    crew: &Crew,
    parts: usize,
    g: &mut [f64],
    update: Option<Update>,
    s: &View,
) -> Extremes {
    fn pass(g: &mut [f64], u: &Option<Update>, s: &View, offset: usize) -> Extremes {
        match u {
            Some(u) => extremes_part::<true>(g, u, s, offset),
            None => {
                let none = Update {
                    ki: s.ap,
                    kj: s.ap,
                    di: 0.0,
                    dj: 0.0,
                };
                extremes_part::<false>(g, &none, s, offset)
            }
        }
    }
    if parts <= 1 {
        return pass(g, &update, s, 0);
    }
    let span = span(g.len(), parts);
    let found = crew.chunks_mut(g, span, |k, gp| {
        let r = k * span..k * span + gp.len();
        pass(
            gp,
            &update.map(|u| u.part(r.clone())),
            &s.part(r.clone()),
            r.start,
        )
    });
    let mut e = found[0];
    for f in &found[1..] {
        (e.m, e.i) = better::<true>((e.m, e.i), (f.m, f.i));
        (e.big_m, e.j) = better::<false>((e.big_m, e.j), (f.big_m, f.j));
    }
    e
}

/// The WSS2 choice of the second variable (its code, or [`NONE`]), split over the crew
/// like [`extremes`].
pub(in crate::solver::smo) fn wss2(crew: &Crew, g: &[f64], w: &Second, s: &View) -> u64 {
    let code = wss2_split(crew, parts(crew, g.len()), g, w, s);
    #[cfg(test)]
    reference::check_wss2(g, w, s, code);
    code
}

/// [`wss2`] in `parts` parts, merged like [`extremes_split`].
pub(super) fn wss2_split(crew: &Crew, parts: usize, g: &[f64], w: &Second, s: &View) -> u64 {
    if parts <= 1 {
        return wss2_part(g, w, s, 0).1;
    }
    let (n, span) = (g.len(), span(g.len(), parts));
    let found = crew.map(n.div_ceil(span), |k| {
        let r = k * span..((k + 1) * span).min(n);
        wss2_part(
            &g[r.clone()],
            &w.part(r.clone()),
            &s.part(r.clone()),
            r.start,
        )
    });
    found
        .into_iter()
        .reduce(better::<false>)
        .map_or(NONE, |b| b.1)
}
