//! Multifrontal LU without row exchanges on a fill-reducing symmetric ordering.
//!
//! The Jacobian of a reversible mass-action network is structurally symmetric (a species that
//! enters a step's rate is changed by it, and the other way round), and the matrices the
//! integrators factor, I − hγJ, are close to the identity on every step that is not huge. So
//! the elimination order can be chosen once, from the structure alone, by approximate minimum
//! degree (Amestoy, Davis & Duff, SIAM J. Matrix Anal. Appl. 17 (1996) 886); the factors then
//! have the structure of the Cholesky factor of the symmetrised pattern, grouped into
//! supernodes (columns sharing one row structure). Each factorisation runs the multifrontal
//! method (Duff & Reid, ACM TOMS 9 (1983) 302; Liu, SIAM Review 34 (1992) 82): one dense
//! frontal matrix per supernode, assembled from the matrix and the children's update
//! matrices, partly factored, and its Schur complement passed up the tree, so nearly all the
//! arithmetic is dense matrix products. Everything that depends on the structure alone (order,
//! supernodes, where each entry and each child's rows land) is worked out once.
//!
//! Without row exchanges a small pivot can spoil the factors, so every pivot is compared with
//! the entries below it (threshold pivoting's test, Duff, Erisman & Reid, Direct Methods for
//! Sparse Matrices, 2nd ed., §5.4); a pivot that fails is reported and the caller falls back to
//! an LU with partial pivoting.

use faer::linalg::matmul::matmul;
use faer::linalg::triangular_solve::{solve_lower_triangular_in_place, solve_unit_lower_triangular_in_place};
use faer::reborrow::{Reborrow, ReborrowMut};
use faer::sparse::linalg::cholesky::{
    factorize_symbolic_cholesky, CholeskySymbolicParams, SymbolicCholeskyRaw, SymmetricOrdering,
};
use faer::sparse::linalg::SupernodalThreshold;
use faer::sparse::SymbolicSparseColMatRef;
use faer::{Accum, MatMut, Par, Side};
use rayon::ThreadPool;
use std::sync::Mutex;

use super::Pattern;

/// A pivot smaller than this fraction of the largest entry below it in its column is refused:
/// the element growth it allows (at most 1/PIVOT_THRESHOLD per step) would cost digits the
/// Newton iteration needs. 1e-3 is a loose form of the 0.1-0.01 customary for threshold pivoting
/// (common practice), loose because the factors only feed a modified Newton iteration.
const PIVOT_THRESHOLD: f64 = 1e-3;

/// A pivot failed the threshold test or was not finite.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct UnstablePivot;

/// One supernode: columns `first..end` of the reordered matrix and the rows below them.
struct Supernode {
    first: usize,
    end: usize,
    /// Rows (reordered numbering, ascending, all ≥ `end`) of the off-diagonal block.
    below: Vec<usize>,
    /// Where each row of `below` sits in the parent's frontal matrix.
    in_parent: Vec<usize>,
    /// (position in the input's values, offset in this frontal matrix) of the input entries
    /// this supernode assembles.
    entries: Vec<(usize, usize)>,
    /// Children in the order they are factored (their update matrices sit on the stack in it).
    children: Vec<usize>,
    /// Start of this supernode's m × w column block (L below, U's diagonal block on top) and of
    /// its w × r block of U to the right, in the factor stores.
    lower_at: usize,
    upper_at: usize,
}

impl Supernode {
    fn width(&self) -> usize {
        self.end - self.first
    }

    fn size(&self) -> usize {
        self.width() + self.below.len()
    }
}

pub struct FrontalLu {
    /// `order[new] = old`: the elimination order.
    order: Vec<usize>,
    supernodes: Vec<Supernode>,
    /// Which thread factors which supernodes.
    share: Share,
    /// L and U, where the solves read them.
    factors: Factors,
    /// One per part of `share`, then one for its top.
    workspaces: Vec<Workspace>,
    /// One worker per part after the first (which the calling thread takes), so that a part is
    /// always factored and solved on the same thread, whose core's cache keeps what it wrote
    /// (None: fewer than two parts, or no threads to be had).
    workers: Option<ThreadPool>,
    /// The right-hand side before the parts' forward substitutions (merging their changes).
    before: Vec<f64>,
    factored: bool,
}

/// The supernode tree shared between threads: whole subtrees in `parts` (each factored by one
/// thread, children first), and the supernodes above them in `top`, factored afterwards by the
/// calling thread. The factors are stored part by part, then the top, so that each thread
/// writes its own slice. One thread: no parts, everything in `top`.
struct Share {
    parts: Vec<Part>,
    /// The remaining supernodes, children first.
    top: Vec<usize>,
    /// Top supernodes in column order (the solves' order; every supernode when there are no
    /// parts).
    top_columns: Vec<usize>,
    /// For a part's subtree root: (part, offset) of its update matrix on that part's stack once
    /// the part is factored (the update matrices of a part's roots stay there, in order).
    waiting: Vec<Option<(usize, usize)>>,
}

struct Part {
    /// Its supernodes children first, and in column order.
    schedule: Vec<usize>,
    columns: Vec<usize>,
    /// Where its factors end in `lower` and `upper`.
    lower_end: usize,
    upper_end: usize,
}

/// One thread's working storage.
struct Workspace {
    /// Dense frontal matrix of the supernode being factored (column-major, largest size²).
    front: Vec<f64>,
    /// The front before, when it holds an update matrix its parent, factored next, reads there.
    held: Vec<f64>,
    /// Update matrices waiting for their parent.
    stack: Vec<f64>,
    /// Reordered right-hand side during a solve.
    x: Vec<f64>,
    /// A supernode's contribution to the rows below it during a solve.
    sum: Vec<f64>,
}

/// The factors: each supernode's m × w column block (L below, U's diagonal block on top) in
/// `lower`, its w × r block of U to the right by rows in `upper`.
///
/// Stored in single precision when they are large: a triangular solve then reads every factor
/// entry once for two flops, so its time is the memory traffic, which halves. Only for solves
/// inside an iteration that computes its residual in double precision (a modified Newton
/// iteration), where factors rounded to 6e-8 act as a slightly different iteration matrix and
/// leave the converged answer unchanged: the idea of mixed-precision iterative refinement
/// (Baboulin et al., Comput. Phys. Commun. 180 (2009) 2526; Carson & Higham, SIAM J. Sci.
/// Comput. 40 (2018) A817).
enum Factors {
    Double { lower: Vec<f64>, upper: Vec<f64> },
    Single { lower: Vec<f32>, upper: Vec<f32> },
}

/// A factor entry in either precision.
trait Entry: Copy {
    fn from_f64(x: f64) -> Self;
    fn to_f64(self) -> f64;
}

impl Entry for f64 {
    fn from_f64(x: f64) -> Self {
        x
    }
    fn to_f64(self) -> f64 {
        self
    }
}

impl Entry for f32 {
    fn from_f64(x: f64) -> Self {
        x as f32
    }
    fn to_f64(self) -> f64 {
        f64::from(self)
    }
}

impl FrontalLu {
    /// Orders the symmetrised pattern and lays out supernodes and assembly maps; `None` when
    /// the symbolic analysis fails (the caller then uses a pivoting LU). With `single_above`,
    /// factors of more entries than that are stored in single precision (see [`Factors`]); with
    /// `threads` above one, a large factorisation is shared between that many threads.
    pub fn new(pattern: &Pattern, single_above: Option<usize>, threads: usize) -> Option<FrontalLu> {
        let n = pattern.n;
        let symmetric = symmetrised(pattern);
        let structure =
            SymbolicSparseColMatRef::new_checked(n, n, &symmetric.col_ptr, None, &symmetric.row_idx);
        let params = CholeskySymbolicParams {
            supernodal_flop_ratio_threshold: SupernodalThreshold::FORCE_SUPERNODAL,
            ..Default::default()
        };
        let symbolic =
            factorize_symbolic_cholesky(structure, Side::Lower, SymmetricOrdering::Amd, params).ok()?;
        let SymbolicCholeskyRaw::Supernodal(tree) = symbolic.raw() else {
            return None;
        };
        let (order, position) = match symbolic.perm() {
            Some(perm) => {
                let (forward, inverse) = perm.arrays();
                (forward.to_vec(), inverse.to_vec())
            }
            None => ((0..n).collect(), (0..n).collect()),
        };
        let mut supernodes: Vec<Supernode> = (0..tree.n_supernodes())
            .map(|s| {
                let rows = &tree.row_idx()[tree.col_ptr_for_row_idx()[s]..tree.col_ptr_for_row_idx()[s + 1]];
                let mut below = rows.to_vec();
                below.sort_unstable();
                Supernode {
                    first: tree.supernode_begin()[s],
                    end: tree.supernode_end()[s],
                    below,
                    in_parent: Vec::new(),
                    entries: Vec::new(),
                    children: Vec::new(),
                    lower_at: 0,
                    upper_at: 0,
                }
            })
            .collect();
        let mut owner = vec![0; n];
        for (s, node) in supernodes.iter().enumerate() {
            owner[node.first..node.end].iter_mut().for_each(|o| *o = s);
        }
        let parent: Vec<Option<usize>> = supernodes
            .iter()
            .map(|node| node.below.first().map(|&row| owner[row]))
            .collect();
        let schedule = postorder(&parent);
        for &s in &schedule {
            if let Some(p) = parent[s] {
                supernodes[p].children.push(s);
            }
        }
        // Local index of a reordered row in the frontal matrix of the supernode at hand.
        let mut local = vec![usize::MAX; n];
        // Each input entry (i, j) belongs to the supernode owning column min(i, j).
        let mut by_owner: Vec<Vec<(usize, usize, usize)>> = vec![Vec::new(); supernodes.len()];
        for col in 0..n {
            for p in pattern.col_ptr[col]..pattern.col_ptr[col + 1] {
                let (i, j) = (position[pattern.row_idx[p]], position[col]);
                by_owner[owner[i.min(j)]].push((p, i, j));
            }
        }
        for s in 0..supernodes.len() {
            let node = &supernodes[s];
            for (k, row) in (node.first..node.end)
                .chain(node.below.iter().copied())
                .enumerate()
            {
                local[row] = k;
            }
            let size = node.size();
            let entries = by_owner[s]
                .iter()
                .map(|&(p, i, j)| (p, local[i] + local[j] * size))
                .collect();
            let maps: Vec<(usize, Vec<usize>)> = node
                .children
                .iter()
                .map(|&c| (c, supernodes[c].below.iter().map(|&row| local[row]).collect()))
                .collect();
            for (c, in_parent) in maps {
                supernodes[c].in_parent = in_parent;
            }
            supernodes[s].entries = entries;
        }
        let (share, lower_len, upper_len) = Share::new(&mut supernodes, &parent, &schedule, threads);
        let largest = supernodes.iter().map(Supernode::size).max().unwrap_or(0);
        let workspace = |stack_capacity| Workspace {
            front: vec![0.0; largest * largest],
            held: vec![0.0; largest * largest],
            stack: Vec::with_capacity(stack_capacity),
            x: vec![0.0; n],
            sum: vec![0.0; largest],
        };
        let mut workspaces: Vec<Workspace> = share.parts.iter().map(|_| workspace(0)).collect();
        workspaces.push(workspace(stack_peak(&supernodes, &schedule)));
        // Part 0 runs on the calling thread, each other part on a worker of its own.
        let workers = share
            .parts
            .len()
            .checked_sub(1)
            .filter(|&helpers| helpers > 0)
            .and_then(|helpers| {
                rayon::ThreadPoolBuilder::new()
                    .num_threads(helpers)
                    .thread_name(|k| format!("kinequil-lu-{k}"))
                    .build()
                    .ok()
            });
        Some(FrontalLu {
            order,
            supernodes,
            share,
            workers,
            workspaces,
            before: vec![0.0; n],
            factors: match single_above {
                Some(limit) if lower_len + upper_len > limit => Factors::Single {
                    lower: vec![0.0; lower_len],
                    upper: vec![0.0; upper_len],
                },
                _ => Factors::Double {
                    lower: vec![0.0; lower_len],
                    upper: vec![0.0; upper_len],
                },
            },
            factored: false,
        })
    }

    /// Entries of L and U together (what a factorisation writes and a solve reads).
    pub fn entries(&self) -> usize {
        match &self.factors {
            Factors::Double { lower, upper } => lower.len() + upper.len(),
            Factors::Single { lower, upper } => lower.len() + upper.len(),
        }
    }

    /// How many parts the tree is shared into (its factorisation and solves).
    #[cfg(test)]
    pub fn parts(&self) -> usize {
        self.share.parts.len()
    }

    /// The widest supernode: whether a test reaches the blocked factorisation of the pivot block.
    #[cfg(test)]
    pub fn widest(&self) -> usize {
        self.supernodes.iter().map(Supernode::width).max().unwrap_or(0)
    }

    /// Factors the matrix with `values` on `pattern` (the pattern this was built from).
    pub fn factor(&mut self, values: &[f64]) -> Result<(), UnstablePivot> {
        self.factored = false;
        let (supernodes, share, workspaces) = (&self.supernodes, &self.share, &mut self.workspaces[..]);
        let workers = self.workers.as_ref();
        match &mut self.factors {
            Factors::Double { lower, upper } => {
                factor_shared(supernodes, share, workers, values, workspaces, lower, upper)
            }
            Factors::Single { lower, upper } => {
                factor_shared(supernodes, share, workers, values, workspaces, lower, upper)
            }
        }?;
        self.factored = true;
        Ok(())
    }

    /// Solves A x = b in place with the last factorisation; false when there is none.
    pub fn solve(&mut self, b: &mut [f64]) -> bool {
        if !self.factored {
            return false;
        }
        let (top, parts) = self.workspaces.split_last_mut().expect("a workspace for the top");
        for (new, &old) in self.order.iter().enumerate() {
            top.x[new] = b[old];
        }
        let (supernodes, share, before) = (&self.supernodes, &self.share, &mut self.before);
        let workers = self.workers.as_ref();
        match &self.factors {
            Factors::Double { lower, upper } => {
                solve_shared(supernodes, share, workers, lower, upper, top, parts, before)
            }
            Factors::Single { lower, upper } => {
                solve_shared(supernodes, share, workers, lower, upper, top, parts, before)
            }
        }
        for (new, &old) in self.order.iter().enumerate() {
            b[old] = top.x[new];
        }
        true
    }
}

impl Share {
    /// Splits the tree for `threads` threads (or not at all when the factors have fewer than
    /// [`SHARE_ABOVE`] entries) and lays the factor storage out part by part; returns the share and
    /// the lengths of `lower` and `upper`.
    ///
    /// The split: start from the roots and keep moving the costliest subtree to the top (its
    /// children join the candidates), packing the candidates onto the threads costliest first;
    /// keep the split with the least estimated time (top plus the busiest thread). The cost of
    /// a supernode is its flops plus its frontal matrix's size² (the memory passes).
    fn new(
        supernodes: &mut [Supernode],
        parent: &[Option<usize>],
        schedule: &[usize],
        threads: usize,
    ) -> (Share, usize, usize) {
        let count = supernodes.len();
        let cost: Vec<f64> = supernodes
            .iter()
            .map(|node| {
                let (w, r) = (node.width() as f64, node.below.len() as f64);
                2.0 / 3.0 * w * w * w + 2.0 * w * w * r + 2.0 * w * r * r + 50.0 * (w + r) * (w + r)
            })
            .collect();
        let mut subtree = cost.clone();
        for &s in schedule {
            if let Some(p) = parent[s] {
                subtree[p] += subtree[s];
            }
        }
        let total: f64 = schedule
            .iter()
            .filter(|&&s| parent[s].is_none())
            .map(|&s| subtree[s])
            .sum();
        let mut best: (f64, Vec<Vec<usize>>) = (total, Vec::new());
        let entries: usize = supernodes
            .iter()
            .map(|node| node.width() * (node.size() + node.below.len()))
            .sum();
        if threads > 1 && entries > SHARE_ABOVE {
            let mut candidates: Vec<usize> = (0..count).filter(|&s| parent[s].is_none()).collect();
            let mut top_cost = 0.0;
            for _ in 0..SPLIT_TRIES {
                candidates.sort_by(|a, b| subtree[*b].total_cmp(&subtree[*a]));
                let mut bins: Vec<(f64, Vec<usize>)> = vec![(0.0, Vec::new()); threads];
                for &c in &candidates {
                    let lightest = bins
                        .iter_mut()
                        .min_by(|a, b| a.0.total_cmp(&b.0))
                        .expect("at least two bins");
                    lightest.0 += subtree[c];
                    lightest.1.push(c);
                }
                let time = top_cost + bins.iter().map(|b| b.0).fold(0.0, f64::max);
                if time < best.0 {
                    best = (
                        time,
                        bins.into_iter()
                            .map(|b| b.1)
                            .filter(|roots| !roots.is_empty())
                            .collect(),
                    );
                }
                if candidates.is_empty() {
                    break;
                }
                let costliest = candidates.remove(0);
                top_cost += cost[costliest];
                candidates.extend(&supernodes[costliest].children);
            }
        }
        // Which part each supernode is in (None: the top), from its subtree root's.
        let mut part_of: Vec<Option<usize>> = vec![None; count];
        for (k, roots) in best.1.iter().enumerate() {
            for &root in roots {
                part_of[root] = Some(k);
            }
        }
        for &s in schedule.iter().rev() {
            if let (None, Some(p)) = (part_of[s], parent[s]) {
                part_of[s] = part_of[p];
            }
        }
        // Storage part by part, then the top; each part's roots' update matrices, in order, are
        // what its stack holds when it is done.
        let mut length = (0, 0);
        let place = |node: &mut Supernode, length: &mut (usize, usize)| {
            node.lower_at = length.0;
            node.upper_at = length.1;
            length.0 += node.size() * node.width();
            length.1 += node.width() * node.below.len();
        };
        let mut waiting = vec![None; count];
        let mut parts = Vec::new();
        for k in 0..best.1.len() {
            let part_schedule: Vec<usize> = schedule
                .iter()
                .copied()
                .filter(|&s| part_of[s] == Some(k))
                .collect();
            let mut offset = 0;
            for &s in &part_schedule {
                place(&mut supernodes[s], &mut length);
                if parent[s].is_some_and(|p| part_of[p].is_none()) {
                    waiting[s] = Some((k, offset));
                    offset += supernodes[s].below.len().pow(2);
                }
            }
            let mut columns = part_schedule.clone();
            columns.sort_unstable();
            parts.push(Part {
                schedule: part_schedule,
                columns,
                lower_end: length.0,
                upper_end: length.1,
            });
        }
        let top: Vec<usize> = schedule
            .iter()
            .copied()
            .filter(|&s| part_of[s].is_none())
            .collect();
        for &s in &top {
            place(&mut supernodes[s], &mut length);
        }
        let mut top_columns = top.clone();
        top_columns.sort_unstable();
        let share = Share {
            parts,
            top,
            top_columns,
            waiting,
        };
        (share, length.0, length.1)
    }
}

/// Factors of more entries than this are shared between threads (factorisation and solves).
/// Below, a solve (two flops per entry) is too short to repay handing half of it over, and a
/// factorisation shared without its solves leaves the solves reading factors written from
/// another core's cache: on a 1000-species network (95,000 entries, 2 cores) sharing made the
/// integration slower, on 5000 species (1.16 million) about 10 % faster.
const SHARE_ABOVE: usize = 1 << 19;

/// Subtrees moved to the top while looking for the best split.
const SPLIT_TRIES: usize = 64;

/// The factorisation, the parts side by side (the first on this thread, the others on their
/// workers), then the top on this thread.
fn factor_shared<T: Entry + Send>(
    supernodes: &[Supernode],
    share: &Share,
    workers: Option<&ThreadPool>,
    values: &[f64],
    workspaces: &mut [Workspace],
    lower: &mut [T],
    upper: &mut [T],
) -> Result<(), UnstablePivot> {
    let (top_workspace, part_workspaces) = workspaces.split_last_mut().expect("a workspace for the top");
    let mut slices = Vec::with_capacity(share.parts.len());
    let (mut lower_rest, mut upper_rest, mut at) = (lower, upper, (0, 0));
    for part in &share.parts {
        let (l, lr) = lower_rest.split_at_mut(part.lower_end - at.0);
        let (u, ur) = upper_rest.split_at_mut(part.upper_end - at.1);
        slices.push((l, u, at));
        (lower_rest, upper_rest, at) = (lr, ur, (part.lower_end, part.upper_end));
    }
    let jobs: Vec<_> = share
        .parts
        .iter()
        .zip(part_workspaces.iter_mut())
        .zip(slices)
        .collect();
    on_workers(workers, jobs, |((part, workspace), (l, u, at))| {
        factor_nodes(
            supernodes,
            &part.schedule,
            values,
            workspace,
            l,
            u,
            at,
            &[],
            &share.waiting,
        )
    })
    .into_iter()
    .collect::<Result<(), UnstablePivot>>()?;
    let finished: Vec<&[f64]> = part_workspaces.iter().map(|w| w.stack.as_slice()).collect();
    factor_nodes(
        supernodes,
        &share.top,
        values,
        top_workspace,
        lower_rest,
        upper_rest,
        at,
        &finished,
        &share.waiting,
    )
}

/// The multifrontal factorisation of `nodes` (children first) into factor slices that start at
/// `at` in `lower` and `upper`: each supernode's front assembled from the matrix and its
/// children's update matrices (from this workspace's stack, or, for a part's root, from that
/// part's finished stack), factored, copied out, and its own update matrix pushed (or, when
/// its parent comes next, left in its front for the parent to read).
#[allow(clippy::too_many_arguments)]
fn factor_nodes<T: Entry>(
    supernodes: &[Supernode],
    nodes: &[usize],
    values: &[f64],
    workspace: &mut Workspace,
    lower: &mut [T],
    upper: &mut [T],
    at: (usize, usize),
    finished: &[&[f64]],
    waiting: &[Option<(usize, usize)>],
) -> Result<(), UnstablePivot> {
    let Workspace {
        front, held, stack, ..
    } = workspace;
    stack.clear();
    // The last child of a supernode is factored just before it (children come first, in
    // order): its update matrix is left in its front, which becomes `held`, and read from
    // there, instead of going through the stack.
    let mut holding = false;
    for (k, &s) in nodes.iter().enumerate() {
        let node = &supernodes[s];
        let (size, width) = (node.size(), node.width());
        let front_now = &mut front[..size * size];
        front_now.fill(0.0);
        for &(p, at) in &node.entries {
            front_now[at] += values[p];
        }
        for (i, &c) in node.children.iter().rev().enumerate() {
            let child = &supernodes[c];
            let r = child.below.len();
            let extend_add = |front: &mut [f64], update: &[f64], stride: usize| {
                for (m, &to_col) in child.in_parent.iter().enumerate() {
                    let target = &mut front[to_col * size..(to_col + 1) * size];
                    for (&to_row, &u) in child.in_parent.iter().zip(&update[m * stride..m * stride + r]) {
                        target[to_row] += u;
                    }
                }
            };
            if i == 0 && holding {
                // The child's front: its update is the block below and right of its pivots.
                let (w, m) = (child.width(), child.size());
                extend_add(front_now, &held[w * m + w..], m);
                holding = false;
                continue;
            }
            // Only a part's root waits elsewhere, and only the top has part roots as children.
            match waiting[c] {
                Some((part, offset)) => extend_add(front_now, &finished[part][offset..offset + r * r], r),
                None => {
                    extend_add(front_now, &stack[stack.len() - r * r..], r);
                    stack.truncate(stack.len() - r * r);
                }
            }
        }
        factor_front(front_now, size, size, width)?;
        keep(node, front_now, lower, upper, at);
        let parent_next = nodes
            .get(k + 1)
            .is_some_and(|&p| supernodes[p].children.last() == Some(&s));
        if parent_next && size > width {
            std::mem::swap(front, held);
            holding = true;
        } else {
            for j in width..size {
                stack.extend_from_slice(&front_now[j * size + width..(j + 1) * size]);
            }
        }
    }
    Ok(())
}

/// Forward and backward substitution of `top.x`, the parts' subtrees on their own threads when
/// the factors are large: forward, each part on its own copy of x, their changes merged, then
/// the top; backward, the top first, then each part on its own copy, their columns merged.
/// A part's supernodes change only their own rows and rows of the top (their ancestors), and
/// read only their own columns and, going backward, the top's, so the copies never conflict.
#[allow(clippy::too_many_arguments)]
fn solve_shared<T: Entry + Sync>(
    supernodes: &[Supernode],
    share: &Share,
    workers: Option<&ThreadPool>,
    lower: &[T],
    upper: &[T],
    top: &mut Workspace,
    parts: &mut [Workspace],
    before: &mut [f64],
) {
    if share.parts.is_empty() {
        forward(
            supernodes,
            &share.top_columns,
            lower,
            upper,
            &mut top.x,
            &mut top.sum,
        );
        backward(
            supernodes,
            &share.top_columns,
            lower,
            upper,
            &mut top.x,
            &mut top.sum,
        );
        return;
    }
    let run_parts = |parts: &mut [Workspace], x: &[f64], step: Substitution<T>| {
        let jobs: Vec<_> = share.parts.iter().zip(parts.iter_mut()).collect();
        on_workers(workers, jobs, |(part, workspace)| {
            workspace.x.copy_from_slice(x);
            step(
                supernodes,
                &part.columns,
                lower,
                upper,
                &mut workspace.x,
                &mut workspace.sum,
            );
        });
    };
    let merge = |parts: &[Workspace], x: &mut [f64], before: &mut [f64]| {
        before.copy_from_slice(x);
        for workspace in parts {
            for ((x, b), p) in x.iter_mut().zip(before.iter()).zip(&workspace.x) {
                *x += p - b;
            }
        }
    };
    run_parts(parts, &top.x, forward::<T>);
    merge(parts, &mut top.x, before);
    forward(
        supernodes,
        &share.top_columns,
        lower,
        upper,
        &mut top.x,
        &mut top.sum,
    );
    backward(
        supernodes,
        &share.top_columns,
        lower,
        upper,
        &mut top.x,
        &mut top.sum,
    );
    run_parts(parts, &top.x, backward::<T>);
    merge(parts, &mut top.x, before);
}

/// `job` on each of `jobs`: job 0 on the calling thread, job k > 0 on worker k − 1 of
/// `workers` (one worker fewer than jobs), side by side; or one after another on this thread
/// when there are no workers. The calling thread works instead of waiting: with a worker per
/// job, three threads shared two cores, and the workers' idle spinning slowed the calling
/// thread's own share of the work (the top of the tree).
fn on_workers<J: Send, R: Send>(
    workers: Option<&ThreadPool>,
    jobs: Vec<J>,
    job: impl Fn(J) -> R + Sync,
) -> Vec<R> {
    match workers {
        Some(pool) => {
            let mut jobs = jobs.into_iter();
            let here = jobs.next().expect("a job for the calling thread");
            let slots: Vec<Mutex<Option<J>>> = jobs.map(|j| Mutex::new(Some(j))).collect();
            let results: Vec<Mutex<Option<R>>> = slots.iter().map(|_| Mutex::new(None)).collect();
            let mine = pool.in_place_scope(|scope| {
                scope.spawn_broadcast(|_, context| {
                    let theirs = lock(&slots[context.index()]).take().expect("one job per worker");
                    *lock(&results[context.index()]) = Some(job(theirs));
                });
                job(here)
            });
            std::iter::once(mine)
                .chain(results.into_iter().map(|r| {
                    r.into_inner()
                        .unwrap_or_else(|poisoned| poisoned.into_inner())
                        .expect("every worker ran its job")
                }))
                .collect()
        }
        None => jobs.into_iter().map(job).collect(),
    }
}

/// The value behind `mutex`, whether or not a thread panicked holding it (a panic in a job is
/// raised again by the scope that ran it).
fn lock<T>(mutex: &Mutex<T>) -> std::sync::MutexGuard<'_, T> {
    mutex.lock().unwrap_or_else(|poisoned| poisoned.into_inner())
}

/// Copies a factored front's L and U blocks into the factor stores (U's off-diagonal block by
/// rows, each pivot row's r entries together: the layout the backward solve reads as dot
/// products).
fn keep<T: Entry>(node: &Supernode, front: &[f64], lower: &mut [T], upper: &mut [T], at: (usize, usize)) {
    let (size, width) = (node.size(), node.width());
    let r = size - width;
    let (lower_at, upper_at) = (node.lower_at - at.0, node.upper_at - at.1);
    let block = &mut lower[lower_at..lower_at + size * width];
    block
        .iter_mut()
        .zip(front)
        .for_each(|(l, &f)| *l = T::from_f64(f));
    // A transpose in tiles of TILE columns: each pass writes TILE entries of a row together
    // and reads TILE columns whose cache lines stay in L1 from one row to the next.
    const TILE: usize = 16;
    let upper = &mut upper[upper_at..upper_at + width * r];
    for tile in (0..r).step_by(TILE) {
        let columns = tile..(tile + TILE).min(r);
        for (i, row) in upper.chunks_exact_mut(r).enumerate() {
            for (u, j) in row[columns.clone()].iter_mut().zip(columns.clone()) {
                *u = T::from_f64(front[(width + j) * size + i]);
            }
        }
    }
}

/// A forward or backward substitution over some supernodes (both take the same arguments so
/// that the shared solve can hand either to its threads).
type Substitution<T> = fn(&[Supernode], &[usize], &[T], &[T], &mut [f64], &mut [f64]);

/// Forward substitution (unit lower factor) over `nodes`, in column order, in place in `x`:
/// each supernode's pivot block, then the rows below summed densely and scattered once.
fn forward<T: Entry>(
    supernodes: &[Supernode],
    nodes: &[usize],
    lower: &[T],
    _upper: &[T],
    x: &mut [f64],
    sum: &mut [f64],
) {
    for &s in nodes {
        let node = &supernodes[s];
        let (size, width, r) = (node.size(), node.width(), node.below.len());
        let block = &lower[node.lower_at..node.lower_at + size * width];
        for (k, column) in block.chunks_exact(size).enumerate() {
            let xk = x[node.first + k];
            if xk != 0.0 {
                for (xi, &l) in x[node.first + k + 1..node.end]
                    .iter_mut()
                    .zip(&column[k + 1..width])
                {
                    *xi -= l.to_f64() * xk;
                }
            }
        }
        if width == 1 {
            // One column: each row's sum would be its one product (0 + p = p exactly), so it
            // goes straight to x, without the sum buffer.
            let xk = x[node.first];
            for (&row, &l) in node.below.iter().zip(&block[1..]) {
                x[row] -= l.to_f64() * xk;
            }
        } else if r > 0 {
            let sum = &mut sum[..r];
            below_product(block, size, width, &x[node.first..node.end], sum);
            for (&row, &s) in node.below.iter().zip(sum.iter()) {
                x[row] -= s;
            }
        }
    }
}

/// Backward substitution (upper factor) over `nodes`, given in column order and taken in
/// reverse: the rows below gathered and taken off each pivot row by a dot product, then the
/// upper triangle of the pivot block.
fn backward<T: Entry>(
    supernodes: &[Supernode],
    nodes: &[usize],
    lower: &[T],
    upper: &[T],
    x: &mut [f64],
    sum: &mut [f64],
) {
    for &s in nodes.iter().rev() {
        let node = &supernodes[s];
        let (size, width, r) = (node.size(), node.width(), node.below.len());
        let block = &lower[node.lower_at..node.lower_at + size * width];
        if width == 1 {
            // One pivot row: its dot product reads x through the row indices directly, in
            // `dot`'s order, instead of from a gathered copy read once.
            let row = &upper[node.upper_at..node.upper_at + r];
            x[node.first] -= dot_through(row, &node.below, |row| x[row]);
        } else if r > 0 {
            let gathered = &mut sum[..r];
            for (g, &row) in gathered.iter_mut().zip(&node.below) {
                *g = x[row];
            }
            let upper = &upper[node.upper_at..node.upper_at + width * r];
            for (xi, row) in x[node.first..node.end].iter_mut().zip(upper.chunks_exact(r)) {
                *xi -= dot(row, gathered);
            }
        }
        for k in (0..width).rev() {
            let column = &block[k * size..k * size + width];
            let xk = x[node.first + k] / column[k].to_f64();
            x[node.first + k] = xk;
            for (xi, &u) in x[node.first..node.first + k].iter_mut().zip(&column[..k]) {
                *xi -= u.to_f64() * xk;
            }
        }
    }
}

/// `sum` = L₂₁ x for a supernode's column block (`size` rows, the first `width` of them the
/// pivot block), four columns at a time: each pass over `sum` then does four columns' work for
/// one load and store of it.
fn below_product<T: Entry>(block: &[T], size: usize, width: usize, x: &[f64], sum: &mut [f64]) {
    sum.fill(0.0);
    let r = size - width;
    let column = |k: usize| &block[k * size + width..k * size + width + r];
    let mut k = 0;
    while k + 4 <= width {
        let (a, b, c, d) = (column(k), column(k + 1), column(k + 2), column(k + 3));
        let (xa, xb, xc, xd) = (x[k], x[k + 1], x[k + 2], x[k + 3]);
        for ((((s, a), b), c), d) in sum.iter_mut().zip(a).zip(b).zip(c).zip(d) {
            *s += a.to_f64() * xa + b.to_f64() * xb + c.to_f64() * xc + d.to_f64() * xd;
        }
        k += 4;
    }
    for (k, &xa) in x.iter().enumerate().take(width).skip(k) {
        for (s, a) in sum.iter_mut().zip(column(k)) {
            *s += a.to_f64() * xa;
        }
    }
}

/// Σ a_i b_i with four running sums, so that the additions do not wait on one another.
fn dot<T: Entry>(a: &[T], b: &[f64]) -> f64 {
    dot_through(a, b, |v| v)
}

/// Σ a_i value(b_i), summed as [`dot`] sums: `dot` itself, or a dot product with x read
/// through row indices (b_i = rows_i, value = x[row]).
fn dot_through<T: Entry, B: Copy>(a: &[T], b: &[B], value: impl Fn(B) -> f64) -> f64 {
    let mut sums = [0.0; 4];
    let (a4, b4) = (a.chunks_exact(4), b.chunks_exact(4));
    let tail: f64 = a4
        .remainder()
        .iter()
        .zip(b4.remainder())
        .map(|(x, &y)| x.to_f64() * value(y))
        .sum();
    for (x, y) in a4.zip(b4) {
        for l in 0..4 {
            sums[l] += x[l].to_f64() * value(y[l]);
        }
    }
    (sums[0] + sums[1]) + (sums[2] + sums[3]) + tail
}

/// Pivot blocks wider than this are split in two and factored recursively, so that most of
/// their arithmetic, too, is matrix products.
pub const BLOCK: usize = 24;

/// Eliminates the first `width` pivots of the `size` × `size` frontal matrix stored column-major
/// in `front` with columns `ld` apart: LU of the pivot block, the panels by triangular solves,
/// then the Schur complement by one matrix product. A pivot passes the threshold test when no
/// multiplier in its column exceeds 1/PIVOT_THRESHOLD (|l_ik| = |a_ik| / |u_kk|).
fn factor_front(front: &mut [f64], ld: usize, size: usize, width: usize) -> Result<(), UnstablePivot> {
    if width > BLOCK {
        // Left half first (its Schur complement covers the right half), then the right half
        // of what remains: a right-looking blocked LU.
        let half = width / 2;
        factor_front(front, ld, size, half)?;
        return factor_front(&mut front[half + half * ld..], ld, size - half, width - half);
    }
    let bound = 1.0 / PIVOT_THRESHOLD;
    for k in 0..width {
        let pivot = front[k + k * ld];
        if !pivot.is_finite() || pivot == 0.0 {
            return Err(UnstablePivot);
        }
        for v in &mut front[k * ld + k + 1..k * ld + width] {
            *v /= pivot;
            if v.abs() > bound {
                return Err(UnstablePivot);
            }
        }
        for j in k + 1..width {
            let u = front[k + j * ld];
            if u != 0.0 {
                let (left, right) = front.split_at_mut(j * ld);
                let column = &left[k * ld + k + 1..k * ld + width];
                for (x, &l) in right[k + 1..width].iter_mut().zip(column) {
                    *x -= l * u;
                }
            }
        }
    }
    if width == size {
        return Ok(());
    }
    let matrix =
        MatMut::from_column_major_slice_with_stride_mut(&mut front[..(size - 1) * ld + size], size, size, ld);
    let (pivots, mut right_of, mut below, mut rest) = matrix.split_at_mut(width, width);
    // L21 U11 = A21, solved as U11ᵀ L21ᵀ = A21ᵀ; U12 = L11⁻¹ A12.
    solve_lower_triangular_in_place(pivots.rb().transpose(), below.rb_mut().transpose_mut(), Par::Seq);
    // Column by column without early exit, so that the test vectorises (an infinity fails the
    // bound, a NaN is caught by name).
    for j in 0..width {
        let column = below
            .rb()
            .col(j)
            .try_as_col_major()
            .expect("a column-major front");
        if column
            .as_slice()
            .iter()
            .fold(false, |bad, l| bad | l.is_nan() | (l.abs() > bound))
        {
            return Err(UnstablePivot);
        }
    }
    solve_unit_lower_triangular_in_place(pivots.rb(), right_of.rb_mut(), Par::Seq);
    matmul(
        rest.rb_mut(),
        Accum::Add,
        below.rb(),
        right_of.rb(),
        -1.0,
        Par::Seq,
    );
    Ok(())
}

/// A postorder of the forest given by `parent` (children before parents, each subtree
/// contiguous), so that update matrices can live on one stack.
fn postorder(parent: &[Option<usize>]) -> Vec<usize> {
    let n = parent.len();
    let mut children = vec![Vec::new(); n];
    let mut roots = Vec::new();
    for (s, p) in parent.iter().enumerate() {
        match p {
            Some(p) => children[*p].push(s),
            None => roots.push(s),
        }
    }
    let mut order = Vec::with_capacity(n);
    let mut pending: Vec<(usize, bool)> = roots.iter().rev().map(|&r| (r, false)).collect();
    while let Some((s, expanded)) = pending.pop() {
        if expanded {
            order.push(s);
        } else {
            pending.push((s, true));
            pending.extend(children[s].iter().rev().map(|&c| (c, false)));
        }
    }
    order
}

/// Largest number of update-matrix entries waiting on the stack during a factorisation.
fn stack_peak(supernodes: &[Supernode], schedule: &[usize]) -> usize {
    let (mut now, mut peak) = (0_usize, 0_usize);
    for &s in schedule {
        let node = &supernodes[s];
        now -= node
            .children
            .iter()
            .map(|&c| supernodes[c].below.len().pow(2))
            .sum::<usize>();
        now += node.below.len().pow(2);
        peak = peak.max(now);
    }
    peak
}

/// The pattern of A + Aᵀ with the full diagonal.
fn symmetrised(pattern: &Pattern) -> Pattern {
    let mut entries = Vec::with_capacity(2 * pattern.nnz() + pattern.n);
    for col in 0..pattern.n {
        entries.push((col, col));
        for &row in &pattern.row_idx[pattern.col_ptr[col]..pattern.col_ptr[col + 1]] {
            entries.push((row, col));
            entries.push((col, row));
        }
    }
    Pattern::from_entries(pattern.n, entries)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A 3 × 3 front with one pivot, column-major: the pivot, then the two rows below it.
    fn front_with_first_column(pivot: f64, below: [f64; 2]) -> Vec<f64> {
        vec![pivot, below[0], below[1], 1.0, 1.0, 0.0, 1.0, 0.0, 1.0]
    }

    #[test]
    fn the_threshold_test_reads_every_multiplier_below_the_pivot_block() {
        // Multipliers 0.5 and 0.25 pass; 1e4 (pivot 1e-4 against 1, beyond 1/PIVOT_THRESHOLD),
        // an infinite and a NaN one fail, wherever they sit in the column.
        let mut fine = front_with_first_column(2.0, [1.0, 0.5]);
        assert_eq!(factor_front(&mut fine, 3, 3, 1), Ok(()));
        assert_eq!((fine[1], fine[2]), (0.5, 0.25));
        // The Schur complement: a11 − l1 u12 = 1 − 0.5 · 1.
        assert_eq!(fine[4], 0.5);
        for below in [[1.0, 0.0], [0.0, 1.0]] {
            let mut small_pivot = front_with_first_column(1e-4, below);
            assert_eq!(factor_front(&mut small_pivot, 3, 3, 1), Err(UnstablePivot));
        }
        for bad in [f64::INFINITY, f64::NAN] {
            let mut front = front_with_first_column(2.0, [0.5, bad]);
            assert_eq!(factor_front(&mut front, 3, 3, 1), Err(UnstablePivot));
        }
    }
}
