//! Stress-optic law and closed-form reference fields (placeholder for the renderer helper).

/// Pure bending: edge fringe order N = 6M / (f_σ · d²); M in N·mm, d in mm, f_σ in N/mm.
pub fn pure_bending_edge_order(moment_n_mm: f64, depth_mm: f64, fringe_value_n_per_mm: f64) -> f64 {
    6.0 * moment_n_mm / (fringe_value_n_per_mm * depth_mm * depth_mm)
}
