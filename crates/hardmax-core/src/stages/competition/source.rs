//! The one current-source type of the competition stages: the bias of the current-mode WTA's
//! common node, the tail of the differential pair, and any later circuit's bias. A source is an
//! ideal current or a biased NMOS (drain at the node it drains, source and bulk at ground, gate
//! at a fixed voltage).
//!
//! [`CurrentSource`] is generic over how the transistor is described, so one type follows the
//! design / chip / conditions split of the developers' guide:
//! `CurrentSource<Transistor>` as designed (sizes), `CurrentSource<Ekv>` evaluated at a
//! temperature with its mismatch, `CurrentSource<Mos>` folded for the solvers' inner loops.
//!
//! Numerical core: no I/O, no printing.

use crate::device::{Ekv, MosMismatch, Transistor};

use super::common::{finite, nmos, Devices};
use super::mos::Mos;
use super::{positive, CompetitionError};

/// A current source draining a stage's common node.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum CurrentSource<D = Transistor> {
    /// An ideal current sink of `current` amperes (needs its node above ground to work).
    Ideal { current: f64 },
    /// An NMOS (drain at the node, source and bulk at ground) with its gate at `gate_voltage`
    /// volts.
    Transistor { device: D, gate_voltage: f64 },
}

/// Parameter names (config keys) of a stage's source, for its error messages.
#[derive(Clone, Copy, Debug)]
pub struct SourceKeys {
    /// The ideal current.
    pub current: &'static str,
    /// The transistor (its polarity).
    pub device: &'static str,
    /// The transistor's width.
    pub w: &'static str,
    /// The transistor's length.
    pub l: &'static str,
    /// The transistor's gate voltage.
    pub gate_voltage: &'static str,
    /// Why the transistor must be an NMOS.
    pub nmos_reason: &'static str,
    /// Check the polarity before the size (else after): which error a design with several
    /// faults reports first.
    pub nmos_first: bool,
}

impl<D> CurrentSource<D> {
    /// True for a transistor source.
    pub fn is_transistor(&self) -> bool {
        matches!(self, CurrentSource::Transistor { .. })
    }

    /// The same source with its transistor described by `f` (an ideal current is kept).
    pub fn map<E>(&self, f: impl FnOnce(&D) -> E) -> CurrentSource<E> {
        match self {
            CurrentSource::Ideal { current } => CurrentSource::Ideal { current: *current },
            CurrentSource::Transistor {
                device,
                gate_voltage,
            } => CurrentSource::Transistor {
                device: f(device),
                gate_voltage: *gate_voltage,
            },
        }
    }
}

impl CurrentSource<Transistor> {
    /// Check the source's parameters; the error names the first bad one.
    pub(super) fn validate(
        self,
        stage: &'static str,
        keys: &SourceKeys,
    ) -> Result<(), CompetitionError> {
        match self {
            CurrentSource::Ideal { current } => positive(stage, keys.current, current),
            CurrentSource::Transistor {
                device,
                gate_voltage,
            } => {
                if keys.nmos_first {
                    nmos(stage, keys.device, &device, keys.nmos_reason)?;
                }
                positive(stage, keys.w, device.w)?;
                positive(stage, keys.l, device.l)?;
                if !keys.nmos_first {
                    nmos(stage, keys.device, &device, keys.nmos_reason)?;
                }
                finite(stage, keys.gate_voltage, gate_voltage)
            }
        }
    }

    /// The source's mismatch: one draw for a transistor, none for an ideal current.
    pub(super) fn draw<F>(self, draw: &mut F) -> MosMismatch
    where
        F: FnMut(&Transistor) -> MosMismatch,
    {
        match self {
            CurrentSource::Transistor { device, .. } => draw(&device),
            CurrentSource::Ideal { .. } => MosMismatch::default(),
        }
    }

    /// The source evaluated with `devices` (its mismatch `mm` is ignored for an ideal current).
    pub(super) fn at(self, devices: &Devices<'_>, mm: MosMismatch) -> CurrentSource<Ekv> {
        self.map(|t| devices.one(t, mm))
    }
}

impl CurrentSource<Ekv> {
    /// The folded form for the solvers (see [`Mos`]).
    pub fn fast(&self) -> CurrentSource<Mos> {
        self.map(Mos::new)
    }

    /// The current it carries with its drain at `v_drain`: the ideal current, or the
    /// transistor's EKV current.
    pub fn current_at(&self, v_drain: f64) -> f64 {
        match *self {
            CurrentSource::Ideal { current } => current,
            CurrentSource::Transistor {
                device,
                gate_voltage,
            } => device.id(gate_voltage, v_drain, 0.0),
        }
    }
}

impl CurrentSource<Mos> {
    /// Source current and its derivative in the drained node's voltage `v`.
    #[inline]
    pub fn eval(&self, v: f64) -> (f64, f64) {
        match *self {
            CurrentSource::Ideal { current } => (current, 0.0),
            CurrentSource::Transistor {
                device,
                gate_voltage,
            } => {
                let e = device.eval(gate_voltage, v, 0.0);
                (e.id, e.d_vd)
            }
        }
    }

    /// [`CurrentSource::eval_lanes`] with the starting-point kernels ([`Mos::eval_lanes_start`]).
    #[inline]
    pub fn eval_lanes_start(
        &self,
        v: &crate::maths::Lanes,
    ) -> (crate::maths::Lanes, crate::maths::Lanes) {
        self.eval_lanes_with::<true>(v)
    }

    /// [`CurrentSource::eval`] at [`LANES`](crate::maths::LANES) voltages (vectorised EKV).
    #[inline]
    pub fn eval_lanes(
        &self,
        v: &crate::maths::Lanes,
    ) -> (crate::maths::Lanes, crate::maths::Lanes) {
        self.eval_lanes_with::<false>(v)
    }

    #[inline(always)]
    fn eval_lanes_with<const START: bool>(
        &self,
        v: &crate::maths::Lanes,
    ) -> (crate::maths::Lanes, crate::maths::Lanes) {
        use crate::maths::LANES;
        match *self {
            CurrentSource::Ideal { current } => ([current; LANES], [0.0; LANES]),
            CurrentSource::Transistor {
                device,
                gate_voltage,
            } => {
                let (g, s) = (&[gate_voltage; LANES], &[0.0; LANES]);
                let e = if START {
                    device.eval_lanes_start(g, v, s)
                } else {
                    device.eval_lanes(g, v, s)
                };
                (e.id, e.d_vd)
            }
        }
    }

    /// ln of the source current; for a transistor, its weak-inversion saturation current.
    #[inline]
    pub fn ln_weak_current(&self) -> f64 {
        match *self {
            CurrentSource::Ideal { current } => current.ln(),
            CurrentSource::Transistor {
                device: m,
                gate_voltage,
            } => m.is.ln() + (gate_voltage - m.vt0) * m.inv_n * m.inv_ut,
        }
    }

    /// The parameter that sets the source current: `keys.current` or `keys.gate_voltage`.
    pub fn key(&self, keys: &SourceKeys) -> &'static str {
        match self {
            CurrentSource::Ideal { .. } => keys.current,
            CurrentSource::Transistor { .. } => keys.gate_voltage,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::device::Polarity;

    fn pmos(w: f64) -> Transistor {
        Transistor {
            polarity: Polarity::Pmos,
            w,
            l: 1e-6,
        }
    }

    fn parameter(r: Result<(), CompetitionError>) -> Option<&'static str> {
        match r {
            Err(CompetitionError::InvalidParameter { parameter, .. }) => Some(parameter),
            _ => None,
        }
    }

    // Regression pin of the stages' own documented contract ("the error names the first bad
    // one", in each stage's check order), no outside source: a PMOS source of zero width is
    // reported by its polarity when `nmos_first`, by its width otherwise.
    #[test]
    fn source_check_order_follows_the_keys() {
        let mut keys = SourceKeys {
            current: "s.current",
            device: "s.device",
            w: "s.device.w",
            l: "s.device.l",
            gate_voltage: "s.gate_voltage",
            nmos_reason: "must be an NMOS",
            nmos_first: true,
        };
        let bad = CurrentSource::Transistor {
            device: pmos(0.0),
            gate_voltage: 0.5,
        };
        assert_eq!(parameter(bad.validate("t", &keys)), Some("s.device"));
        keys.nmos_first = false;
        assert_eq!(parameter(bad.validate("t", &keys)), Some("s.device.w"));
        let gate = CurrentSource::Transistor {
            device: Transistor {
                polarity: Polarity::Nmos,
                w: 1e-6,
                l: 1e-6,
            },
            gate_voltage: f64::NAN,
        };
        assert_eq!(parameter(gate.validate("t", &keys)), Some("s.gate_voltage"));
        assert_eq!(
            parameter(CurrentSource::Ideal { current: -1.0 }.validate("t", &keys)),
            Some("s.current")
        );
        assert!(CurrentSource::Ideal { current: 1e-9 }
            .validate("t", &keys)
            .is_ok());
    }

    // The serialised form keeps the keys the two former bias and tail types had (snake_case
    // externally tagged variants: `ideal.current`, `transistor.device`/`gate_voltage`): a
    // format pin of ours, no outside source.
    #[test]
    fn serialised_keys_are_unchanged() {
        let s =
            serde_json::to_string(&CurrentSource::<Transistor>::Ideal { current: 1e-9 }).unwrap();
        assert_eq!(s, r#"{"ideal":{"current":1e-9}}"#);
        let t = CurrentSource::Transistor {
            device: pmos(1e-6),
            gate_voltage: 0.5,
        };
        let v: serde_json::Value = serde_json::to_value(t).unwrap();
        assert_eq!(v["transistor"]["gate_voltage"], 0.5);
        assert!(v["transistor"]["device"].is_object());
    }
}
