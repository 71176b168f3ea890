//! `holdup serve --checkpoint FILE`: the save coil writes the sensor's
//! whole state there (the kernel's two-slot checkpoint records, CRC-checked
//! and tied to the plant configuration), and a restart restores it.

use std::path::{Path, PathBuf};

use holdup_kernel::checkpoint::{RestoreReport, SlotInfo};

use crate::link::{PlantLink, CHECKPOINT_IMAGE};

/// The checkpoint file and its image in memory.
#[derive(Debug)]
pub struct CheckpointFile {
    path: PathBuf,
    image: Vec<u8>,
}

impl CheckpointFile {
    /// The file at `path`, its newest valid state restored into `link` when
    /// it exists (`None`: no file yet; it is created at the first save).
    ///
    /// Errors, naming the file: unreadable, the wrong size, or no valid
    /// state for this plant configuration (another plant's, or both slots
    /// damaged); `link` is then unchanged.
    pub fn open(
        path: &Path,
        link: &mut dyn PlantLink,
    ) -> Result<(Self, Option<RestoreReport>), String> {
        let shown = path.display();
        if !path.exists() {
            let image = vec![0u8; CHECKPOINT_IMAGE];
            return Ok((
                Self {
                    path: path.into(),
                    image,
                },
                None,
            ));
        }
        let mut image = std::fs::read(path).map_err(|e| format!("{shown}: {e}"))?;
        if image.len() != CHECKPOINT_IMAGE {
            return Err(format!(
                "{shown}: {} bytes, a checkpoint file has {CHECKPOINT_IMAGE}",
                image.len()
            ));
        }
        let report = link
            .restore_state(&mut image)
            .map_err(|e| format!("{shown}: {}", e.message()))?;
        Ok((
            Self {
                path: path.into(),
                image,
            },
            Some(report),
        ))
    }

    /// The file's path.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Save `link`'s state into the older slot and write the file (to a
    /// temporary beside it, then renamed over it).
    ///
    /// Errors: the kernel's (state too large) or the file's, naming it.
    pub fn save(&mut self, link: &dyn PlantLink) -> Result<SlotInfo, String> {
        let shown = self.path.display();
        let info = link
            .save_state(&mut self.image)
            .map_err(|e| format!("{shown}: {}", e.message()))?;
        let tmp = self.path.with_extension("tmp");
        std::fs::write(&tmp, &self.image)
            .and_then(|()| std::fs::rename(&tmp, &self.path))
            .map_err(|e| format!("{shown}: {e}"))?;
        Ok(info)
    }
}
