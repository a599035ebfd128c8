//! Section sizes of a firmware ELF image.

use std::path::Path;

use object::{Object, ObjectSection, SectionFlags, SectionKind};

use crate::DeviceError;

/// Sizes in bytes of the sections that occupy flash or RAM on the board.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct SectionSizes {
    /// Startup code and tables: `.vector_table` (Cortex-M), `.boot2` (RP2040 second-stage boot
    /// loader), `.init*` and `.trap*` (RISC-V, where the runtime's own `.init.rust` lands in a
    /// section of its own).
    pub startup: u64,
    /// `.text`.
    pub text: u64,
    /// `.rodata`.
    pub rodata: u64,
    /// `.data` (in RAM, with its initial image in flash).
    pub data: u64,
    /// `.bss`.
    pub bss: u64,
    /// `.uninit`.
    pub uninit: u64,
    /// Other allocated sections with contents, such as `.eh_frame`: they take flash too.
    pub other: u64,
    /// Every allocated section as `(name, size)`, in file order.
    pub all: Vec<(String, u64)>,
}

impl SectionSizes {
    /// Bytes programmed into flash: startup, `.text`, `.rodata`, the `.data` image and other
    /// allocated sections with contents.
    #[must_use]
    pub const fn flash(&self) -> u64 {
        self.startup + self.text + self.rodata + self.data + self.other
    }

    /// RAM taken by statics: `.data + .bss + .uninit`.
    #[must_use]
    pub const fn static_ram(&self) -> u64 {
        self.data + self.bss + self.uninit
    }
}

/// Reads the section sizes of an ELF image.
///
/// # Errors
/// [`DeviceError::Elf`] when the bytes are not an ELF file the `object` crate can read.
pub fn section_sizes(elf_bytes: &[u8], path: &Path) -> Result<SectionSizes, DeviceError> {
    let file = object::File::parse(elf_bytes).map_err(|e| DeviceError::Elf {
        path: path.to_owned(),
        detail: e.to_string(),
    })?;
    let mut sizes = SectionSizes::default();
    for section in file.sections() {
        let Ok(name) = section.name() else { continue };
        // Only sections that occupy target memory (SHF_ALLOC) count; `.defmt` and debug
        // information live in the file alone.
        let allocated = matches!(
            section.flags(),
            SectionFlags::Elf { sh_flags } if sh_flags & u64::from(object::elf::SHF_ALLOC) != 0
        );
        if !allocated || section.size() == 0 {
            continue;
        }
        let size = section.size();
        match name {
            ".vector_table" | ".boot2" => sizes.startup += size,
            n if n.starts_with(".init") || n.starts_with(".trap") => sizes.startup += size,
            ".text" => sizes.text += size,
            ".rodata" => sizes.rodata += size,
            ".data" => sizes.data += size,
            ".bss" => sizes.bss += size,
            ".uninit" => sizes.uninit += size,
            // Reservations without contents (`.heap`, `.stack`) take no flash.
            _ if section.kind() == SectionKind::UninitializedData => {}
            _ => sizes.other += size,
        }
        sizes.all.push((name.to_owned(), size));
    }
    Ok(sizes)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rejects_what_is_not_elf() {
        let err = section_sizes(b"not an elf file", Path::new("x.elf")).unwrap_err();
        assert!(matches!(err, DeviceError::Elf { .. }), "{err}");
        assert!(err.to_string().contains("x.elf"));
    }

    #[test]
    fn totals_add_up() {
        let s = SectionSizes {
            startup: 1,
            text: 10,
            rodata: 100,
            data: 1000,
            bss: 10_000,
            uninit: 100_000,
            other: 1_000_000,
            all: Vec::new(),
        };
        assert_eq!(s.flash(), 1_001_111);
        assert_eq!(s.static_ram(), 111_000);
    }
}
