//! Stand-in for the shared Pelgrom sampler.
//!
//! replaced by device::mismatch::sample_mismatch once merged

use rand_distr::StandardNormal;

use crate::device::{DeviceTech, MosMismatch, Transistor};

/// One device's own Pelgrom deviation: sigma = A_pair / sqrt(2 W L) for both V_T0 and beta
/// (M. Pelgrom, A. Duinmaijer, A. Welbers, IEEE JSSC 24(5), 1989; the pair constant describes
/// the difference of two devices, hence the factor 2), Gaussian, independent.
// replaced by device::mismatch::sample_mismatch once merged
pub(crate) fn sample_mismatch<R: rand::Rng>(
    rng: &mut R,
    tech: &DeviceTech,
    t: &Transistor,
) -> MosMismatch {
    let root = (2.0 * t.w * t.l).sqrt();
    let z_vt: f64 = rng.sample(StandardNormal);
    let z_beta: f64 = rng.sample(StandardNormal);
    if root > 0.0 && root.is_finite() {
        MosMismatch {
            dvt0: z_vt * tech.a_vt_pair / root,
            dbeta_rel: z_beta * tech.a_beta_pair / root,
        }
    } else {
        MosMismatch::default()
    }
}
