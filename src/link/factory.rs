//! Builds an axis's link from its configuration (and a `--port` override): the one place
//! that knows every kind of link, so the engine never names one.

use std::sync::Arc;

use super::{Link, OnceLink, SerialLink};
use crate::config::{AxisConfig, TransportConfig};
use crate::sim::board::{spawn_in_process, SimBoardHandle};

/// Baud rate for a `--port` that replaces a simulated axis (USB CDC boards ignore it).
const OVERRIDE_BAUD: u32 = 921_600;

/// A link, and the simulated board behind it when it is simulated in process.
pub struct BuiltLink {
    /// The link.
    pub link: Arc<dyn Link>,
    /// The in-process board, for tests and displays.
    pub sim: Option<SimBoardHandle>,
}

/// The link for `axis` (the `index`-th axis: it seeds a simulated board's noise), on
/// `device` instead of its configured transport when given. A simulated board is started at
/// once, so this must run inside a tokio runtime.
pub fn build(axis: &AxisConfig, index: usize, device: Option<&str>) -> BuiltLink {
    if let Some(device) = device {
        let baud = match &axis.transport {
            TransportConfig::Serial { baud, .. } => *baud,
            TransportConfig::Sim(_) => OVERRIDE_BAUD,
        };
        return BuiltLink {
            link: Arc::new(SerialLink { device: device.to_owned(), baud }),
            sim: None,
        };
    }
    match &axis.transport {
        TransportConfig::Serial { device, baud } => BuiltLink {
            link: Arc::new(SerialLink { device: device.clone(), baud: *baud }),
            sim: None,
        },
        TransportConfig::Sim(sim) => {
            let (stream, handle) =
                spawn_in_process(&sim.plant, &sim.faults, 0x5E12_0770 + index as u64);
            BuiltLink { link: Arc::new(OnceLink::new(Box::new(stream))), sim: Some(handle) }
        }
    }
}
