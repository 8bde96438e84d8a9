//! Reading the facts runprint needs from a 64-bit ELF shared object, without loading it.
//!
//! Everything here works on the file's bytes (normally a memory map) through the `object`
//! crate's low-level ELF reader, which parses lazily: only the headers and the few sections
//! asked for are touched, so a 500 MB library costs microseconds (see the measurements in
//! `docs/performance.md`).
//!
//! What is read, and from where (System V ABI, "Dynamic Section" and "Program Header"; the GNU
//! symbol-versioning extension for `.gnu.version_d`):
//! * `DT_NEEDED`, `DT_SONAME`, `DT_RPATH`, `DT_RUNPATH` from the dynamic section;
//! * exported symbols from `.dynsym`, and the bytes of a function through the `PT_LOAD`
//!   segment that maps its address;
//! * `.rodata` and `.comment` for embedded version strings;
//! * version definitions (`.gnu.version_d`);
//! * the constructors listed in `.init_array`, resolved through `R_*_RELATIVE` relocations
//!   (or the value stored in place when relocations are packed), so their first bytes can be
//!   compared with known start-up code.

use object::elf;
use object::read::elf::{Dyn, FileHeader, ProgramHeader, Rela, SectionHeader, SectionTable, Sym};
use object::Endianness;

type Header = elf::FileHeader64<Endianness>;

/// A parsed ELF file borrowing its bytes.
pub struct ElfFile<'a> {
    data: &'a [u8],
    endian: Endianness,
    header: &'a Header,
    sections: SectionTable<'a, Header, &'a [u8]>,
}

/// The dynamic-linking facts of a shared object.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct DynamicInfo {
    /// `DT_SONAME`.
    pub soname: Option<String>,
    /// `DT_NEEDED` entries in order.
    pub needed: Vec<String>,
    /// `DT_RPATH` entries, split at `:`.
    pub rpath: Vec<String>,
    /// `DT_RUNPATH` entries, split at `:`.
    pub runpath: Vec<String>,
}

/// The processor family of a file, as far as the decoders below care.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Machine {
    /// x86-64.
    X86_64,
    /// 64-bit ARM.
    Aarch64,
    /// Anything else.
    Other,
}

/// True when the bytes start like an ELF file.
pub fn is_elf(data: &[u8]) -> bool {
    data.starts_with(b"\x7fELF")
}

impl<'a> ElfFile<'a> {
    /// Parses the header and section table of a 64-bit ELF file.
    pub fn parse(data: &'a [u8]) -> Result<ElfFile<'a>, String> {
        if data.get(4) != Some(&elf::ELFCLASS64.0) {
            return Err("not a 64-bit ELF file".into());
        }
        let header = Header::parse(data).map_err(|e| e.to_string())?;
        let endian = header.endian().map_err(|e| e.to_string())?;
        let sections = header.sections(endian, data).map_err(|e| e.to_string())?;
        Ok(ElfFile {
            data,
            endian,
            header,
            sections,
        })
    }

    /// The processor family.
    pub fn machine(&self) -> Machine {
        match self.header.e_machine(self.endian) {
            elf::EM_X86_64 => Machine::X86_64,
            elf::EM_AARCH64 => Machine::Aarch64,
            _ => Machine::Other,
        }
    }

    /// SONAME, NEEDED, RPATH and RUNPATH from the dynamic section.
    pub fn dynamic(&self) -> DynamicInfo {
        let mut info = DynamicInfo::default();
        let Ok(Some((dyns, link))) = self.sections.dynamic(self.endian, self.data) else {
            return info;
        };
        let Ok(strings) = self.sections.strings(self.endian, self.data, link) else {
            return info;
        };
        for d in dyns {
            let tag = d.d_tag(self.endian);
            if tag == elf::DT_NULL {
                break;
            }
            let Ok(s) = d.string(self.endian, strings) else {
                continue;
            };
            let s = String::from_utf8_lossy(s).into_owned();
            match tag {
                elf::DT_NEEDED => info.needed.push(s),
                elf::DT_SONAME => info.soname = Some(s),
                elf::DT_RPATH => info.rpath.extend(split_paths(&s)),
                elf::DT_RUNPATH => info.runpath.extend(split_paths(&s)),
                _ => {}
            }
        }
        info
    }

    /// The contents of a section, by name.
    pub fn section(&self, name: &str) -> Option<&'a [u8]> {
        let (_, s) = self
            .sections
            .section_by_name(self.endian, name.as_bytes())?;
        s.data(self.endian, self.data).ok()
    }

    /// True when the dynamic symbol table exports (defines) `name`.
    pub fn exports(&self, name: &str) -> bool {
        self.dynamic_symbol(name).is_some()
    }

    /// Address of a defined dynamic symbol.
    pub fn symbol_address(&self, name: &str) -> Option<u64> {
        self.dynamic_symbol(name).map(|(addr, _)| addr)
    }

    /// Address and size of a defined dynamic symbol.
    fn dynamic_symbol(&self, name: &str) -> Option<(u64, u64)> {
        let table = self
            .sections
            .symbols(self.endian, self.data, elf::SHT_DYNSYM)
            .ok()?;
        let strings = table.strings();
        table.iter().find_map(|sym| {
            if sym.st_shndx(self.endian) == elf::SHN_UNDEF {
                return None;
            }
            (sym.name(self.endian, strings).ok()? == name.as_bytes())
                .then(|| (sym.st_value(self.endian), sym.st_size(self.endian)))
        })
    }

    /// True when the full symbol table (`.symtab`, usually stripped from shipped libraries)
    /// holds a symbol of this name.
    pub fn has_local_symbol(&self, name: &str) -> bool {
        let Ok(table) = self
            .sections
            .symbols(self.endian, self.data, elf::SHT_SYMTAB)
        else {
            return false;
        };
        let strings = table.strings();
        table
            .iter()
            .any(|sym| sym.name(self.endian, strings).ok() == Some(name.as_bytes()))
    }

    /// The code bytes of an exported function (at most `max` bytes).
    pub fn function_bytes(&self, name: &str, max: usize) -> Option<&'a [u8]> {
        let (addr, size) = self.dynamic_symbol(name)?;
        let len = if size == 0 {
            max
        } else {
            (size as usize).min(max)
        };
        self.bytes_at(addr, len)
    }

    /// An exported function's address and code bytes (at most `max` bytes).
    pub fn function(&self, name: &str, max: usize) -> Option<(u64, &'a [u8])> {
        let (addr, _) = self.dynamic_symbol(name)?;
        Some((addr, self.function_bytes(name, max)?))
    }

    /// The names of the defined dynamic symbols that start with `prefix`, in one pass.
    pub fn exported_with_prefix(&self, prefix: &str) -> Vec<String> {
        let Ok(table) = self
            .sections
            .symbols(self.endian, self.data, elf::SHT_DYNSYM)
        else {
            return Vec::new();
        };
        let strings = table.strings();
        table
            .iter()
            .filter(|sym| sym.st_shndx(self.endian) != elf::SHN_UNDEF)
            .filter_map(|sym| sym.name(self.endian, strings).ok())
            .filter(|n| n.starts_with(prefix.as_bytes()))
            .map(|n| String::from_utf8_lossy(n).into_owned())
            .collect()
    }

    /// Maps a virtual address to a file offset through the `PT_LOAD` segments.
    pub fn offset_of(&self, addr: u64) -> Option<usize> {
        let phdrs = self.header.program_headers(self.endian, self.data).ok()?;
        phdrs.iter().find_map(|ph| {
            if ph.p_type(self.endian) != elf::PT_LOAD {
                return None;
            }
            let (vaddr, filesz) = (ph.p_vaddr(self.endian), ph.p_filesz(self.endian));
            (addr >= vaddr && addr - vaddr < filesz)
                .then(|| ph.p_offset(self.endian).checked_add(addr - vaddr))
                .flatten()
                .and_then(|o| usize::try_from(o).ok())
        })
    }

    /// Up to `len` bytes of the file at a virtual address.
    pub fn bytes_at(&self, addr: u64, len: usize) -> Option<&'a [u8]> {
        let off = self.offset_of(addr)?;
        let end = off.checked_add(len)?.min(self.data.len());
        self.data.get(off..end)
    }

    /// A NUL-terminated string at a virtual address.
    pub fn c_string_at(&self, addr: u64) -> Option<String> {
        let bytes = self.bytes_at(addr, 256)?;
        let end = bytes.iter().position(|&b| b == 0)?;
        Some(String::from_utf8_lossy(&bytes[..end]).into_owned())
    }

    /// Names of the symbol versions this file defines (`GOMP_5.0`, `GLIBC_2.36`…), without the
    /// file's own base entry.
    pub fn version_definitions(&self) -> Vec<String> {
        let mut out = Vec::new();
        let Ok(Some((mut defs, link))) = self.sections.gnu_verdef(self.endian, self.data) else {
            return out;
        };
        let Ok(strings) = self.sections.strings(self.endian, self.data, link) else {
            return out;
        };
        while let Ok(Some((def, mut aux))) = defs.next() {
            if def.vd_flags.get(self.endian).0 & elf::VER_FLG_BASE.0 != 0 {
                continue;
            }
            if let Ok(Some(a)) = aux.next() {
                if let Ok(name) = a.name(self.endian, strings) {
                    out.push(String::from_utf8_lossy(name).into_owned());
                }
            }
        }
        out
    }

    /// Addresses of the functions run when the object is loaded (`.init_array`).
    pub fn constructors(&self) -> Vec<u64> {
        let Some((_, init)) = self.sections.section_by_name(self.endian, b".init_array") else {
            return Vec::new();
        };
        let start = init.sh_addr(self.endian);
        let size = init.sh_size(self.endian);
        let slots: Vec<u64> = (0..size / 8).map(|i| start + i * 8).collect();
        // Relative relocations that fill the slots (x86-64 R_X86_64_RELATIVE = 8, AArch64
        // R_AARCH64_RELATIVE = 1027): the addend is the constructor's address.
        let relative = match self.machine() {
            Machine::X86_64 => elf::R_X86_64_RELATIVE,
            Machine::Aarch64 => elf::R_AARCH64_RELATIVE,
            Machine::Other => return Vec::new(),
        };
        let mut found = vec![None; slots.len()];
        for section in self.sections.iter() {
            if section.sh_type(self.endian) != elf::SHT_RELA {
                continue;
            }
            let Ok(Some((relas, _))) = section.rela(self.endian, self.data) else {
                continue;
            };
            for r in relas {
                let off = r.r_offset(self.endian);
                if off < start || off >= start + size {
                    continue;
                }
                if r.r_type(self.endian, false) == relative {
                    found[((off - start) / 8) as usize] = Some(r.r_addend(self.endian) as u64);
                }
            }
        }
        let stored = self.section(".init_array").unwrap_or_default();
        slots
            .iter()
            .enumerate()
            .filter_map(|(i, _)| {
                found[i].or_else(|| {
                    let b = stored.get(i * 8..i * 8 + 8)?;
                    let v = match self.endian {
                        Endianness::Little => u64::from_le_bytes(b.try_into().ok()?),
                        Endianness::Big => u64::from_be_bytes(b.try_into().ok()?),
                    };
                    // 0 and -1 are list markers, not functions.
                    (v != 0 && v != u64::MAX).then_some(v)
                })
            })
            .collect()
    }
}

fn split_paths(s: &str) -> Vec<String> {
    s.split(':')
        .filter(|p| !p.is_empty())
        .map(str::to_string)
        .collect()
}

/// Decodes a function that only returns a small constant, as compilers emit for
/// `openblas_get_parallel` or `bli_info_get_enable_openmp`. Anything else gives `None`.
///
/// Patterns (Intel SDM vol. 2 for `mov r32, imm32` = `B8+rd id`, `xor r32, r/m32` = `31 /r`,
/// `ret` = `C3`, `endbr64` = `F3 0F 1E FA`; Arm ARM for `MOVZ` and `RET`).
pub fn constant_return(machine: Machine, code: &[u8]) -> Option<u32> {
    match machine {
        Machine::X86_64 => {
            let code = code.strip_prefix(&[0xf3, 0x0f, 0x1e, 0xfa]).unwrap_or(code);
            match code {
                [0xb8, a, b, c, d, 0xc3, ..] => Some(u32::from_le_bytes([*a, *b, *c, *d])),
                [0x31, 0xc0, 0xc3, ..] => Some(0),
                _ => None,
            }
        }
        Machine::Aarch64 => {
            let w0 = u32::from_le_bytes(code.get(0..4)?.try_into().ok()?);
            let w1 = u32::from_le_bytes(code.get(4..8)?.try_into().ok()?);
            // MOVZ W0, #imm16 (hw = 0), then RET.
            (w0 & 0xffe0_001f == 0x5280_0000 && w1 == 0xd65f_03c0).then_some((w0 >> 5) & 0xffff)
        }
        Machine::Other => None,
    }
}

/// Decodes a function that only returns the address of a string, as compilers emit for
/// `bli_info_get_version_str` on x86-64: `lea rax, [rip + rel32]; ret`. Returns the string's
/// address given the function's address.
pub fn string_return_target(machine: Machine, fn_addr: u64, code: &[u8]) -> Option<u64> {
    if machine != Machine::X86_64 {
        return None;
    }
    let (skip, code) = match code.strip_prefix(&[0xf3, 0x0f, 0x1e, 0xfa]) {
        Some(rest) => (4u64, rest),
        None => (0, code),
    };
    match code {
        [0x48, 0x8d, 0x05, a, b, c, d, 0xc3, ..] => {
            let rel = i32::from_le_bytes([*a, *b, *c, *d]) as i64;
            Some((fn_addr + skip + 7).wrapping_add_signed(rel))
        }
        _ => None,
    }
}

/// True when a constructor's first bytes are GCC's `crtfastmath.o` start-up code, which turns
/// on flush-to-zero and denormals-are-zero for the whole process.
///
/// x86-64 (bytes of `set_fast_math` in GCC 12's crtfastmath.o, disassembled on this project's
/// build machine): `stmxcsr m32` (`0F AE /3`), `or m32, 0x8040` (FTZ bit 15 | DAZ bit 6) and
/// `ldmxcsr m32` (`0F AE /2`). AArch64 (from memory, not checked on a sample): `mrs xN, fpcr`
/// then `msr fpcr, xN` setting FZ.
pub fn is_fast_math_constructor(machine: Machine, code: &[u8]) -> bool {
    match machine {
        Machine::X86_64 => {
            let has_or_8040 = memchr::memmem::find(code, &[0x40, 0x80, 0x00, 0x00]).is_some();
            let modrm_reg = |op: u8| {
                code.windows(3).any(|w| {
                    w[0] == 0x0f && w[1] == 0xae && (w[2] >> 3) & 7 == op && w[2] >> 6 != 3
                })
            };
            has_or_8040 && modrm_reg(3) && modrm_reg(2)
        }
        Machine::Aarch64 => {
            let words: Vec<u32> = code
                .chunks_exact(4)
                .map(|c| u32::from_le_bytes([c[0], c[1], c[2], c[3]]))
                .collect();
            let mrs = words.iter().position(|w| w & 0xffff_ffe0 == 0xd53b_4400);
            let msr = words.iter().position(|w| w & 0xffff_ffe0 == 0xd51b_4400);
            matches!((mrs, msr), (Some(a), Some(b)) if a < b)
        }
        Machine::Other => false,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn constant_returns_decode_and_others_are_refused() {
        // Byte sequences from native-detection notes §1.5 and §3.2 (measured there).
        assert_eq!(
            constant_return(Machine::X86_64, &[0xb8, 1, 0, 0, 0, 0xc3]),
            Some(1)
        );
        assert_eq!(
            constant_return(Machine::X86_64, &[0xb8, 2, 0, 0, 0, 0xc3]),
            Some(2)
        );
        assert_eq!(
            constant_return(Machine::X86_64, &[0x31, 0xc0, 0xc3]),
            Some(0)
        );
        assert_eq!(
            constant_return(
                Machine::Aarch64,
                &[0x20, 0x00, 0x80, 0x52, 0xc0, 0x03, 0x5f, 0xd6]
            ),
            Some(1)
        );
        // A real function (push rbp; mov rbp, rsp) is refused.
        assert_eq!(
            constant_return(Machine::X86_64, &[0x55, 0x48, 0x89, 0xe5]),
            None
        );
    }

    #[test]
    fn lea_ret_gives_the_string_address() {
        // lea rax, [rip + 0x10]; ret at 0x1000 -> 0x1000 + 7 + 0x10.
        let code = [0x48, 0x8d, 0x05, 0x10, 0, 0, 0, 0xc3];
        assert_eq!(
            string_return_target(Machine::X86_64, 0x1000, &code),
            Some(0x1017)
        );
    }

    #[test]
    fn gcc_crtfastmath_bytes_are_recognised() {
        // objdump -d of GCC 12's crtfastmath.o (Debian 12), function set_fast_math.
        let code = [
            0xf3, 0x0f, 0x1e, 0xfa, 0x0f, 0xae, 0x5c, 0x24, 0xfc, 0x81, 0x4c, 0x24, 0xfc, 0x40,
            0x80, 0x00, 0x00, 0x0f, 0xae, 0x54, 0x24, 0xfc, 0xc3,
        ];
        assert!(is_fast_math_constructor(Machine::X86_64, &code));
        // frame_dummy-like code is not.
        assert!(!is_fast_math_constructor(
            Machine::X86_64,
            &[0xf3, 0x0f, 0x1e, 0xfa, 0xe9, 0x7b, 0xff, 0xff, 0xff]
        ));
    }

    #[test]
    fn non_elf_is_an_error_not_a_panic() {
        assert!(ElfFile::parse(b"not an elf").is_err());
        assert!(ElfFile::parse(b"\x7fELF\x02\x01\x01").is_err());
    }
}
