// Package gradient computes the t-SNE objective and its gradient and runs the
// optimiser that turns a sparse input-affinity matrix P (a core.CSR) into a
// 2-D or 3-D map.
//
// # Objective and gradient
//
// The objective is KL(P‖Q) = Σ_{i≠j} p_ij ln(p_ij / q_ij) with output
// similarities q_ij = w_ij / Z, where
//
//	w_ij = (1 + ‖y_i − y_j‖²/α)^(−α),   Z = Σ_{k≠l} w_kl,
//
// the heavy-tailed kernel with α degrees of freedom: α = 1 is the Cauchy
// kernel of t-SNE (van der Maaten & Hinton 2008, JMLR 9, eqs. 2 and 4),
// general α is from Kobak, Linderman, Steinerberger, Kluger & Berens 2019
// (ECML PKDD, heavy-tailed kernels). Since ∂w/∂(d²) = −w^(1+1/α), the gradient
// is
//
//	∂KL/∂y_i = 4 Σ_j (p_ij − q_ij) w_ij^(1/α) (y_i − y_j)
//
// (van der Maaten & Hinton 2008, eq. 5, for α = 1). With the attractive term
// multiplied by an exaggeration ρ the optimiser follows the exact gradient of
//
//	L_ρ(Y) = −ρ Σ p_ij ln w_ij + ln Z   (+ the constant ρ Σ p ln p),
//	∂L_ρ/∂y_i = 4 Σ_j (ρ p_ij − q_ij) w_ij^(1/α) (y_i − y_j).
//
// The gradient splits into a sparse attractive part over the non-zeros of P
// and a dense repulsive part Σ_j w_ij^(1+1/α)(y_i − y_j) / Z over all pairs.
// KL is evaluated as Σ p ln p − Σ p ln w + (Σ p) ln Z, which equals
// Σ p ln(p/q) for the P given even when its float32 values do not sum to 1
// to the last bit.
//
// # Repulsion
//
// The repulsive part is computed in one of three ways (Method):
//
//   - Exact sums all N(N−1) ordered pairs: O(N²), a reference for small N.
//   - Tree is Barnes–Hut with a quadtree (2-D) or octree (3-D) (van der
//     Maaten 2014, JMLR 15): a cell of the tree stands for all its points,
//     placed at their centre of mass, when r_cell < θ·‖y_i − y_cell‖, r_cell
//     being the size of the cell (here the diagonal of a quadtree cell and the
//     side of an octree cell, which give about equal accuracy at equal θ) and
//     θ the opening angle (Params.Theta). Points are visited in groups that
//     share one traversal, with the distance taken to the group's bounding
//     box, so every cell accepted for a group also passes the per-point test;
//     θ = 0 reproduces the exact sums up to rounding.
//   - Grid (2-D maps with α = 1) interpolates onto an equispaced grid of
//     nodes (Linderman, Rachh, Hoskins, Steinerberger & Kluger 2019, Nature
//     Methods 16): every point spreads a unit charge onto the p×p nodes
//     around it with Lagrange weights (p = Params.GridOrder), the node-to-node
//     sums with the kernels 1/(1+d²) and (1/(1+d²))²·d are discrete
//     convolutions evaluated by FFT on a zero-padded grid, and the node
//     potentials are interpolated back to the points with the same weights.
//     Z follows from the same transforms by Parseval's theorem.
//
// Auto picks one of them by N, Dims and Dof (see Auto).
//
// # Optimiser
//
// Optimizer runs gradient descent with momentum and per-coordinate gains
// (van der Maaten & Hinton 2008, section 3.4; van der Maaten 2014). For
// iteration t counted from 0 and the gradient g of L_ρ:
//
//	gain   ← gain + 0.2 where sign(g) ≠ sign(update), else gain·0.8; gain ≥ MinGain
//	update ← momentum·update − (η/4)·gain⊙g
//	Y      ← Y + update, then Y ← Y − mean(Y)
//
// The gains are the delta-bar-delta rule of Jacobs 1988 (Neural Networks 1)
// with the constants 0.2, 0.8 and 0.01 used by van der Maaten 2014 (common
// practice). While t < EarlyIterations the attractive term is multiplied by
// the early exaggeration ρ (12 for 250 iterations, van der Maaten 2014) and
// the momentum is MomentumEarly (0.5); afterwards by MainExaggeration
// (default 1, none; values above 1 as in Kobak & Berens 2019, Nat. Commun.
// 10) with MomentumLate (0.8) (van der Maaten & Hinton 2008).
//
// The learning rate η is stated in the units of a gradient without the
// constant 4, in which 200 is the classic fixed value (common practice). Its
// automatic value is η = max(N/ρ, 200): N/ρ is the rule of Belkina et al.
// 2019 (Nat. Commun. 10), also used by Kobak & Berens 2019 (N/12 with
// ρ = 12); Linderman & Steinerberger 2019 (SIAM J. Math. Data Sci. 1)
// analyse the early exaggeration phase through the product ρ·η relative to
// N. The floor keeps the classic value for small N (common practice).
// InitScale scales a start to a small spread (sd 1e-4, Kobak & Berens 2019).
//
// # Determinism
//
// All parallel work runs through nightjar/internal/par over fixed-size blocks
// of points; reductions are summed per block and the block sums added in
// block order, so every result is bit-identical whatever Params.Threads is.
// The package never reads the number of CPUs: the caller chooses Threads.
package gradient
