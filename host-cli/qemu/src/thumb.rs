//! A look at the machine code of a Thumb firmware: which instructions a function of the engine
//! compiled to. The test command uses it to check that the Cortex-M4 build's dot products use
//! the dual 16-bit multiply-accumulate `SMLALD`, as the engine's hot loops are written to.
//!
//! Encodings are those of the Armv7-M Architecture Reference Manual (ARM DDI 0403E), A5.1
//! (16- and 32-bit instructions) and A7.7.127 (`SMLALD`, encoding T1).

use object::{Object, ObjectSymbol, SymbolKind};

use crate::DeviceError;
use std::path::Path;

/// The code of every function whose demangled name starts with `prefix`: its address and
/// bytes.
///
/// # Errors
/// [`DeviceError::Elf`] if the image cannot be parsed.
pub fn functions<'a>(
    elf_bytes: &'a [u8],
    path: &Path,
    prefix: &str,
) -> Result<Vec<(u64, &'a [u8])>, DeviceError> {
    let file = object::File::parse(elf_bytes).map_err(|e| DeviceError::Elf {
        path: path.to_owned(),
        detail: e.to_string(),
    })?;
    let mut out = Vec::new();
    for sym in file.symbols() {
        if sym.kind() != SymbolKind::Text || sym.size() == 0 {
            continue;
        }
        let Ok(name) = sym.name() else { continue };
        let name = rustc_demangle::demangle(name).to_string();
        if !name.starts_with(prefix) {
            continue;
        }
        // Thumb function symbols carry the Thumb bit in their address.
        let addr = sym.address() & !1;
        let Some(data) = file.sections().find_map(|s| {
            use object::ObjectSection;
            let (start, size) = (s.address(), s.size());
            (addr >= start && addr + sym.size() <= start + size)
                .then(|| s.data().ok())
                .flatten()
                .map(|d| (start, d))
        }) else {
            continue;
        };
        let (start, d) = data;
        let off = (addr - start) as usize;
        if let Some(code) = d.get(off..off + sym.size() as usize) {
            out.push((addr, code));
        }
    }
    Ok(out)
}

/// The instructions of a Thumb code block in order: each as its first halfword and, for a
/// 32-bit instruction, its second. A halfword whose top five bits are `0b11101`, `0b11110` or
/// `0b11111` starts a 32-bit instruction (A5.1).
fn instructions(code: &[u8]) -> impl Iterator<Item = (usize, u16, Option<u16>)> + '_ {
    let half = |i: usize| code.get(i..i + 2).map(|b| u16::from_le_bytes([b[0], b[1]]));
    let mut i = 0usize;
    std::iter::from_fn(move || {
        let h1 = half(i)?;
        let at = i;
        if h1 >> 11 >= 0b11101 {
            let h2 = half(i + 2)?;
            i += 4;
            Some((at, h1, Some(h2)))
        } else {
            i += 2;
            Some((at, h1, None))
        }
    })
}

/// How many `SMLALD`/`SMLALDX` instructions the code holds (encoding T1:
/// `1111 1011 1100 Rn | RdLo RdHi 110 M Rm`).
#[must_use]
pub fn count_smlald(code: &[u8]) -> usize {
    instructions(code)
        .filter(|&(_, h1, h2)| h1 & 0xFFF0 == 0xFBC0 && h2.is_some_and(|h2| h2 & 0x00E0 == 0x00C0))
        .count()
}

/// The targets of the `BL` instructions in code placed at `base` (encoding T1, A7.7.18:
/// `11110 S imm10 | 11 J1 1 J2 imm11`, offset `S:I1:I2:imm10:imm11:0` from the instruction's
/// address plus 4, with `I = NOT(J XOR S)`).
#[must_use]
pub fn call_targets(code: &[u8], base: u64) -> Vec<u64> {
    instructions(code)
        .filter_map(|(at, h1, h2)| {
            let h2 = h2?;
            if h1 & 0xF800 != 0xF000 || h2 & 0xD000 != 0xD000 {
                return None;
            }
            let s = u32::from(h1 >> 10) & 1;
            let j1 = u32::from(h2 >> 13) & 1;
            let j2 = u32::from(h2 >> 11) & 1;
            let i1 = !(j1 ^ s) & 1;
            let i2 = !(j2 ^ s) & 1;
            let imm = (s << 24)
                | (i1 << 23)
                | (i2 << 22)
                | ((u32::from(h1) & 0x3FF) << 12)
                | ((u32::from(h2) & 0x7FF) << 1);
            // Sign-extend the 25-bit offset.
            let off = ((imm << 7) as i32) >> 7;
            Some((base as i64 + at as i64 + 4 + off as i64) as u64)
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn bytes(halves: &[u16]) -> Vec<u8> {
        halves.iter().flat_map(|h| h.to_le_bytes()).collect()
    }

    // The encodings below are as LLVM's disassembler (llvm-objdump) printed them for this
    // project's own firmware: `fbc1 52c0  smlald r5, r2, r1, r0` in the Cortex-M4 build, and
    // `f7ff ff75  bl 0xa3a8` at 0xa4ba in the Cortex-M3 build.

    #[test]
    fn finds_smlald_between_other_instructions() {
        // push {r4-r7, lr}; smlald r5, r2, r1, r0; smull r1, r0, r1, r0; bx lr
        let code = bytes(&[0xb5f0, 0xfbc1, 0x52c0, 0xfb81, 0x1000, 0x4770]);
        assert_eq!(count_smlald(&code), 1);
        // SMLAL (fbc3 100e) is the plain long multiply-accumulate, not the dual one.
        let code = bytes(&[0xfbc3, 0x100e, 0x4770]);
        assert_eq!(count_smlald(&code), 0);
    }

    #[test]
    fn decodes_a_backward_bl() {
        // Placed so that the BL sits at 0xa4ba.
        let code = bytes(&[0x4670, 0xf7ff, 0xff75]);
        assert_eq!(call_targets(&code, 0xa4b8), vec![0xa3a8]);
    }

    #[test]
    fn a_second_halfword_is_not_read_as_an_instruction() {
        // ldr.w r8, [r7, #16] (f8d7 8010): its second halfword must not start a new
        // instruction.
        let code = bytes(&[0xf8d7, 0x8010, 0xfbc1, 0x52c0]);
        let starts: Vec<usize> = instructions(&code).map(|(at, _, _)| at).collect();
        assert_eq!(starts, vec![0, 4]);
    }
}
