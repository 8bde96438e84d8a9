//! Which kernel family a dynamic-architecture OpenBLAS build runs on a given x86-64 CPU,
//! worked out the way the library's own dispatcher does it when it loads.
//!
//! A `DYNAMIC_ARCH` build carries one table of kernels per CPU family it was built for and
//! picks one in `gotoblas_dynamic_init` (OpenBLAS `driver/others/dynamic.c`, read at v0.3.21
//! to v0.3.28 and in a copy of 0.3.30's tree; the tables below cite its functions):
//!
//! 1. `OPENBLAS_CORETYPE` set (even to an empty string): `force_coretype` compares the value
//!    with the names `Katmai` … `Cooperlake` by `strncasecmp(value, name, 20)` (whole value,
//!    any case, no trimming: `"Haswell "` matches nothing). Names 1–24 before 0.3.22, 1–25
//!    from it (`Cooperlake`); `SapphireRapids` can never be forced.
//! 2. Unset: `get_coretype` maps the CPUID vendor, family, model and feature bits to a family.
//! 3. Neither gave one: the feature fallback (AVX512-BF16 → Cooperlake, AVX512VL → SkylakeX,
//!    AVX2 → Haswell, AVX → Sandybridge, else Prescott).
//! 4. A family the build has no table for is replaced by the nearest one it has: the
//!    `#define gotoblas_X gotoblas_Y` chains at the top of `dynamic.c`, one set for builds
//!    given a `DYNAMIC_LIST` and one for the default list.
//! 5. The name reported (`openblas_get_corename`, threadpoolctl's `architecture`) is the first
//!    entry of `gotoblas_corename`'s list whose table is the chosen one; so a build without a
//!    Zen table that runs the Haswell kernels on a Zen CPU says `Haswell`, and one whose
//!    Prescott table stands in for Katmai says `Katmai`.
//!
//! Which tables a build has is read from its exported `gotoblas_<FAMILY>` symbols; a build
//! made from the default list also exports the five 32-bit placeholders (`gotoblas_KATMAI`,
//! …), which a `DYNAMIC_LIST` build does not. `DYNAMIC_OLDER` (more tables for old CPUs, and
//! their own names) is not in the configuration string and is read from the same symbols.
//!
//! Everything here is pure: the CPU comes in as the CPUID registers ([`Cpu::from_registers`]);
//! [`Cpu::this_machine`] reads them on x86-64.

use std::collections::BTreeSet;

/// One of OpenBLAS's x86 kernel families, in the order of `corename[]` in `dynamic.c`
/// (index 1 `Katmai` … 26 `SapphireRapids`); each variant is the family of that name.
#[allow(missing_docs)]
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Family {
    Katmai,
    Coppermine,
    Northwood,
    Prescott,
    Banias,
    Atom,
    Core2,
    Penryn,
    Dunnington,
    Nehalem,
    Athlon,
    Opteron,
    OpteronSse3,
    Barcelona,
    Nano,
    Sandybridge,
    Bobcat,
    Bulldozer,
    Piledriver,
    Haswell,
    Steamroller,
    Excavator,
    Zen,
    SkylakeX,
    Cooperlake,
    SapphireRapids,
}

use Family::*;

/// `corename[1..=26]` of `dynamic.c`, with the family each name stands for.
const NAMES: [(&str, Family); 26] = [
    ("Katmai", Katmai),
    ("Coppermine", Coppermine),
    ("Northwood", Northwood),
    ("Prescott", Prescott),
    ("Banias", Banias),
    ("Atom", Atom),
    ("Core2", Core2),
    ("Penryn", Penryn),
    ("Dunnington", Dunnington),
    ("Nehalem", Nehalem),
    ("Athlon", Athlon),
    ("Opteron", Opteron),
    ("Opteron_SSE3", OpteronSse3),
    ("Barcelona", Barcelona),
    ("Nano", Nano),
    ("Sandybridge", Sandybridge),
    ("Bobcat", Bobcat),
    ("Bulldozer", Bulldozer),
    ("Piledriver", Piledriver),
    ("Haswell", Haswell),
    ("Steamroller", Steamroller),
    ("Excavator", Excavator),
    ("Zen", Zen),
    ("SkylakeX", SkylakeX),
    ("Cooperlake", Cooperlake),
    ("SapphireRapids", SapphireRapids),
];

/// The order in which `gotoblas_corename` tests the tables: `corename[]`'s, except that
/// `Opteron_SSE3` comes before `Opteron`.
fn report_order() -> impl Iterator<Item = Family> {
    NAMES.iter().map(|(_, f)| match f {
        Opteron => OpteronSse3,
        OpteronSse3 => Opteron,
        f => *f,
    })
}

impl Family {
    /// The name in `corename[]`.
    pub fn name(self) -> &'static str {
        NAMES
            .iter()
            .find(|(_, f)| *f == self)
            .map_or("Unknown", |(n, _)| n)
    }

    /// The family of an exported table symbol's suffix (`HASWELL`, `OPTERON_SSE3`).
    pub fn of_symbol_suffix(suffix: &str) -> Option<Family> {
        NAMES
            .iter()
            .find(|(n, _)| n.eq_ignore_ascii_case(suffix))
            .map(|(_, f)| *f)
    }

    /// The name `gotoblas_corename` gives this table when it is the first match: without
    /// `DYNAMIC_OLDER`, the old families share their stand-in's name.
    fn reported(self, older: bool) -> &'static str {
        if older {
            return self.name();
        }
        match self {
            Atom | Nano => "Nehalem",
            Penryn | Dunnington | OpteronSse3 | Opteron | Bobcat => "Core2",
            f => f.name(),
        }
    }
}

/// CPU vendor as `get_vendor` in `dynamic.c` tells them apart (by the CPUID vendor string:
/// `GenuineIntel`, `AuthenticAMD`, `CentaurHauls`, `  Shanghai  `, `HygonGenuine`).
#[allow(missing_docs)]
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Vendor {
    Intel,
    Amd,
    Centaur,
    Zhaoxin,
    Hygon,
    Unknown,
}

/// The CPUID facts the dispatcher reads, already combined as its `support_*` functions
/// combine them (each checks that the operating system saves the registers, through XCR0).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Cpu {
    /// The vendor.
    pub vendor: Vendor,
    /// CPUID.1:EAX bits 8–11.
    pub family: u32,
    /// Bits 20–27.
    pub exfamily: u32,
    /// Bits 4–7.
    pub model: u32,
    /// Bits 16–19.
    pub exmodel: u32,
    /// Bits 0–3.
    pub stepping: u32,
    /// CPUID.1:ECX bit 0 (SSE3), which tells old Opterons apart.
    pub sse3: bool,
    /// CPUID.80000001h:EDX bits 30 and 31 (3DNow! and its extensions), for Athlons.
    pub three_dnow: bool,
    /// `support_avx`.
    pub avx: bool,
    /// `support_avx2`.
    pub avx2: bool,
    /// `support_avx512` (AVX512VL and ZMM state saved).
    pub avx512: bool,
    /// `support_avx512_bf16`.
    pub avx512_bf16: bool,
    /// `support_amx_bf16`.
    pub amx_bf16: bool,
}

/// The raw CPUID registers the dispatcher reads (`[eax, ebx, ecx, edx]`).
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Registers {
    /// Leaf 0: highest leaf and vendor string.
    pub leaf0: [u32; 4],
    /// Leaf 1: signature and feature flags.
    pub leaf1: [u32; 4],
    /// Leaf 7, sub-leaf 0: extended features.
    pub leaf7: [u32; 4],
    /// Leaf 7, sub-leaf 1: AVX512-BF16.
    pub leaf7_1: [u32; 4],
    /// Leaf 0xD, sub-leaf 0: the state components XSAVE supports (AMX).
    pub leaf_d: [u32; 4],
    /// Leaf 0x80000000: highest extended leaf.
    pub ext0: [u32; 4],
    /// Leaf 0x80000001: AMD's extended features (3DNow!).
    pub ext1: [u32; 4],
    /// XCR0 (`xgetbv(0)`), read only when the OS has enabled XSAVE.
    pub xcr0: u64,
}

impl Cpu {
    /// Combines the registers the way `support_avx`, `support_avx2`, `support_avx512`,
    /// `support_avx512_bf16`, `support_amx_bf16` and `get_vendor` in `dynamic.c` do.
    pub fn from_registers(r: &Registers) -> Cpu {
        let [max, b, c, d] = r.leaf0;
        let mut v = [0u8; 12];
        v[0..4].copy_from_slice(&b.to_le_bytes());
        v[4..8].copy_from_slice(&d.to_le_bytes());
        v[8..12].copy_from_slice(&c.to_le_bytes());
        let vendor = match &v {
            b"GenuineIntel" => Vendor::Intel,
            b"AuthenticAMD" => Vendor::Amd,
            b"CentaurHauls" => Vendor::Centaur,
            b"  Shanghai  " => Vendor::Zhaoxin,
            b"HygonGenuine" => Vendor::Hygon,
            // `if ((eax == 0) || ((eax & 0x500) != 0)) return VENDOR_INTEL;`
            _ if max == 0 || max & 0x500 != 0 => Vendor::Intel,
            _ => Vendor::Unknown,
        };
        let eax = r.leaf1[0];
        let ecx1 = r.leaf1[2];
        let bits = |v: u32, shift: u32, mask: u32| (v >> shift) & mask;
        let avx = ecx1 & (1 << 28) != 0
            && ecx1 & (1 << 27) != 0
            && ecx1 & (1 << 26) != 0
            && r.xcr0 & 6 == 6;
        let ebx7 = r.leaf7[1];
        let avx2 = avx && ebx7 & (1 << 5) != 0;
        let avx512 = avx && ebx7 & (1 << 31) != 0 && r.xcr0 & 0xe0 == 0xe0;
        let avx512_bf16 = avx512 && r.leaf7_1[0] & 32 == 32;
        let amx_bf16 = avx512
            && r.leaf7[3] & 0x0100_0000 != 0
            && r.leaf7[3] & 0x0040_0000 != 0
            && r.leaf_d[0] & 0x0006_0000 == 0x0006_0000;
        Cpu {
            vendor,
            family: bits(eax, 8, 0x0f),
            exfamily: bits(eax, 20, 0xff),
            model: bits(eax, 4, 0x0f),
            exmodel: bits(eax, 16, 0x0f),
            stepping: bits(eax, 0, 0x0f),
            sse3: ecx1 & 1 != 0,
            three_dnow: r.ext0[0] & 0xffff >= 1
                && r.ext1[3] & (1 << 30) != 0
                && r.ext1[3] & (1 << 31) != 0,
            avx,
            avx2,
            avx512,
            avx512_bf16,
            amx_bf16,
        }
    }

    /// This machine's CPU (x86-64 only).
    #[cfg(target_arch = "x86_64")]
    pub fn this_machine() -> Option<Cpu> {
        Some(Cpu::from_registers(&read_registers()))
    }

    /// This machine's CPU (x86-64 only).
    #[cfg(not(target_arch = "x86_64"))]
    pub fn this_machine() -> Option<Cpu> {
        None
    }

    /// A short text of everything the dispatch depends on, for cache keys.
    pub fn signature(&self) -> String {
        format!(
            "{:?} {}/{}/{}/{}/{} sse3={} 3dnow={} avx={} avx2={} avx512={} bf16={} amx={}",
            self.vendor,
            self.family,
            self.exfamily,
            self.model,
            self.exmodel,
            self.stepping,
            self.sse3,
            self.three_dnow,
            self.avx,
            self.avx2,
            self.avx512,
            self.avx512_bf16,
            self.amx_bf16
        )
    }
}

#[cfg(target_arch = "x86_64")]
fn read_registers() -> Registers {
    use std::arch::x86_64::{__cpuid, __cpuid_count};
    let regs = |r: std::arch::x86_64::CpuidResult| [r.eax, r.ebx, r.ecx, r.edx];
    let leaf0 = regs(__cpuid(0));
    let max = leaf0[0];
    let leaf = |l: u32, sub: u32| {
        if l <= max {
            regs(__cpuid_count(l, sub))
        } else {
            [0; 4]
        }
    };
    let leaf1 = leaf(1, 0);
    let ext0 = regs(__cpuid(0x8000_0000));
    let ext1 = if ext0[0] >= 0x8000_0001 {
        regs(__cpuid(0x8000_0001))
    } else {
        [0; 4]
    };
    // XGETBV is only defined when the OS has set CR4.OSXSAVE (CPUID.1:ECX bit 27).
    let xcr0 = if leaf1[2] & (1 << 27) != 0 {
        // SAFETY: OSXSAVE is set, so the instruction exists and XCR0 may be read.
        unsafe { xgetbv0() }
    } else {
        0
    };
    Registers {
        leaf0,
        leaf1,
        leaf7: leaf(7, 0),
        leaf7_1: leaf(7, 1),
        leaf_d: leaf(0xd, 0),
        ext0,
        ext1,
        xcr0,
    }
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "xsave")]
unsafe fn xgetbv0() -> u64 {
    std::arch::x86_64::_xgetbv(0)
}

/// An OpenBLAS release as `major.minor.patch` (a `.dev` snapshot counts as its release).
pub type Release = (u32, u32, u32);

/// Parses the version token of the configuration string (`0.3.31.188.0`, `0.3.23.dev`).
pub fn release(version: &str) -> Option<Release> {
    let mut parts = version.split('.').map(|p| p.parse::<u32>().ok());
    Some((parts.next()??, parts.next()??, parts.next()??))
}

/// The oldest release whose dispatcher is modelled here: 0.3.21 brought the feature fallback
/// for unknown AMD families (`dynamic.c` history, "Expand cpu mapping for future Zen cpus").
pub const OLDEST: Release = (0, 3, 21);

/// What a build carries: its kernel tables, read from its exported symbols.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Build {
    /// Its release.
    pub release: Release,
    /// The families with a table of their own (`gotoblas_<FAMILY>` exported).
    pub tables: BTreeSet<Family>,
}

impl Build {
    /// From the release and the suffixes of the exported `gotoblas_*` symbols. `None` when
    /// the release is older than [`OLDEST`] or no table is exported (nothing to go on).
    pub fn new(release: Release, tables: BTreeSet<Family>) -> Option<Build> {
        (release >= OLDEST && tables.contains(&Prescott)).then_some(Build { release, tables })
    }

    /// A build from the default list defines the five 32-bit placeholders itself; a
    /// `DYNAMIC_LIST` build aliases them to Prescott.
    fn uses_default_list(&self) -> bool {
        [Katmai, Coppermine, Northwood, Banias, Athlon]
            .iter()
            .all(|f| self.tables.contains(f))
    }

    /// `DYNAMIC_OLDER`: tables of their own for the old families.
    fn older(&self) -> bool {
        [Atom, Nano, Penryn, Dunnington, Opteron, OpteronSse3, Bobcat]
            .iter()
            .any(|f| self.tables.contains(f))
    }

    /// The table a family's pointer designates in this build (`#define` chains of
    /// `dynamic.c`): the family's own, else the first stand-in the build has.
    pub fn table(&self, f: Family) -> Family {
        if self.tables.contains(&f) {
            return f;
        }
        let chain: &[Family] = if self.uses_default_list() {
            // Default list: old families share Nehalem's or Core2's tables unless
            // DYNAMIC_OLDER; NO_AVX2 / NO_AVX512 / NO_AVX builds lack the newer tables.
            match f {
                Atom | Nano => &[Nehalem],
                Penryn | Dunnington | Opteron | OpteronSse3 | Bobcat => &[Core2],
                Sandybridge => &[Nehalem],
                Bulldozer | Piledriver | Steamroller | Excavator => &[Barcelona],
                Haswell => &[Sandybridge, Nehalem],
                Zen => &[Sandybridge, Barcelona],
                SkylakeX | Cooperlake | SapphireRapids => &[Haswell, Sandybridge, Nehalem],
                _ => &[Prescott],
            }
        } else {
            match f {
                Barcelona | Atom | Bobcat | Sandybridge => &[Nehalem, Prescott],
                Bulldozer | Piledriver | Steamroller | Excavator | Haswell => {
                    &[Sandybridge, Nehalem, Prescott]
                }
                Zen | SkylakeX => &[Haswell, Sandybridge, Nehalem, Prescott],
                Cooperlake | SapphireRapids => &[SkylakeX, Haswell, Sandybridge, Nehalem, Prescott],
                _ => &[Prescott],
            }
        };
        chain
            .iter()
            .copied()
            .find(|c| self.tables.contains(c))
            .unwrap_or(Prescott)
    }

    /// The name `gotoblas_corename` reports for a chosen table.
    pub fn reported_name(&self, table: Family) -> &'static str {
        let older = self.older();
        report_order()
            .find(|f| self.table(*f) == table)
            .map_or("Unknown", |f| f.reported(older))
    }
}

/// `force_coretype`: the family an `OPENBLAS_CORETYPE` value names, or `None` (the value is
/// then ignored and the feature fallback decides).
pub fn forced(value: &str, release: Release) -> Option<Family> {
    let last = if release >= (0, 3, 22) { 25 } else { 24 };
    NAMES[..last]
        .iter()
        .find(|(name, _)| strncasecmp_20(value, name))
        .map(|(_, f)| *f)
}

/// `strncasecmp(a, b, 20) == 0` for ASCII names.
fn strncasecmp_20(a: &str, b: &str) -> bool {
    let a = &a.as_bytes()[..a.len().min(20)];
    let b = &b.as_bytes()[..b.len().min(20)];
    a.eq_ignore_ascii_case(b)
}

/// The usual ladder of Intel's newer models: the widest vector unit the CPU and OS offer.
fn ladder(cpu: &Cpu, bf16: bool, avx512: bool) -> Family {
    if bf16 && cpu.avx512_bf16 {
        Cooperlake
    } else if avx512 && cpu.avx512 {
        SkylakeX
    } else if cpu.avx2 {
        Haswell
    } else if cpu.avx {
        Sandybridge
    } else {
        Nehalem
    }
}

/// `get_coretype`: the family the CPU is taken for, or `None` for one it does not know.
pub fn detected(cpu: &Cpu, release: Release) -> Option<Family> {
    let avx2_ladder = || Some(ladder(cpu, false, false));
    let avx512_ladder = || Some(ladder(cpu, false, true));
    let bf16_ladder = || Some(ladder(cpu, true, true));
    let avx_or_nehalem = || Some(if cpu.avx { Sandybridge } else { Nehalem });
    let (m, em) = (cpu.model, cpu.exmodel);
    match cpu.vendor {
        Vendor::Intel => {
            let fam6 = || -> Option<Option<Family>> {
                Some(match em {
                    0 => match m {
                        0..=7 => Some(Katmai),
                        8 | 10 | 11 => Some(Coppermine),
                        9 | 13 | 14 => Some(Banias),
                        15 => Some(Core2),
                        _ => None,
                    },
                    1 => match m {
                        6 => Some(Core2),
                        7 => Some(Penryn),
                        13 => Some(Dunnington),
                        10 | 11 | 14 | 15 => Some(Nehalem),
                        12 => Some(Atom),
                        _ => None,
                    },
                    2 => match m {
                        5 | 12 | 14 | 15 => Some(Nehalem),
                        10 | 13 => avx_or_nehalem(),
                        _ => None,
                    },
                    3 => match m {
                        10 | 14 => avx_or_nehalem(),
                        12 | 13 | 15 => avx2_ladder(),
                        7 => Some(Atom),
                        _ => None,
                    },
                    4 => match m {
                        5 | 6 | 7 | 14 | 15 => avx2_ladder(),
                        12 | 13 => Some(Nehalem),
                        _ => None,
                    },
                    5 => match m {
                        6 | 7 | 14 => avx2_ladder(),
                        5 => bf16_ladder(),
                        12 | 15 => Some(Nehalem),
                        _ => None,
                    },
                    6 => match m {
                        6 => avx2_ladder(),
                        10 | 12 => bf16_ladder(),
                        _ => None,
                    },
                    7 => match m {
                        10 => Some(Nehalem),
                        13 | 14 => avx512_ladder(),
                        _ => None,
                    },
                    8 => match m {
                        12 | 13 => avx512_ladder(),
                        14 => avx2_ladder(),
                        // Sapphire Rapids: its own tables from 0.3.24.
                        15 if release >= (0, 3, 24) && cpu.amx_bf16 => Some(SapphireRapids),
                        15 => bf16_ladder(),
                        _ => None,
                    },
                    9 => match m {
                        7 | 10 => bf16_ladder(),
                        14 => avx2_ladder(),
                        _ => None,
                    },
                    10 => match m {
                        5 | 6 => avx2_ladder(),
                        7 => avx512_ladder(),
                        _ => None,
                    },
                    // Before 0.3.25 an unknown extended model fell through to family 15's
                    // rule ("Fix unwanted fallthrough from Intel Family 6 to 15").
                    _ => return None,
                })
            };
            let fam15 = || Some(if m <= 2 { Northwood } else { Prescott });
            match cpu.family {
                6 => match fam6() {
                    Some(found) => found,
                    None if release < (0, 3, 25) => fam15(),
                    None => None,
                },
                0xf => fam15(),
                _ => None,
            }
        }
        Vendor::Amd | Vendor::Hygon => {
            if cpu.family <= 0xe {
                return cpu.three_dnow.then_some(Athlon);
            }
            if cpu.family != 0xf {
                return None;
            }
            let avx_or_barcelona = |f: Family| Some(if cpu.avx { f } else { Barcelona });
            match cpu.exfamily {
                0 | 2 => Some(if cpu.sse3 { OpteronSse3 } else { Opteron }),
                5 | 7 => Some(Bobcat),
                6 => match (m, em) {
                    (1, _) => avx_or_barcelona(Bulldozer),
                    (2 | 3, _) => avx_or_barcelona(Piledriver),
                    (5, _) => avx_or_barcelona(Excavator),
                    (0 | 8, 1) => avx_or_barcelona(Piledriver),
                    (0 | 8, 3) => avx_or_barcelona(Steamroller),
                    (0 | 8, 6) => avx_or_barcelona(Excavator),
                    _ => None,
                },
                8 | 9 => avx_or_barcelona(Zen),
                10 => Some(if cpu.avx512_bf16 {
                    Cooperlake
                } else if cpu.avx512 {
                    SkylakeX
                } else if cpu.avx {
                    Zen
                } else {
                    Barcelona
                }),
                _ => None,
            }
        }
        Vendor::Centaur => match cpu.family {
            6 if m == 0xf && cpu.stepping < 0xe => Some(Nano),
            6 => Some(Nehalem),
            // Exmodel 6 (KX-7000) from 0.3.28.
            7 if em == 5 || (em == 6 && release >= (0, 3, 28)) => {
                Some(if cpu.avx2 { Zen } else { Dunnington })
            }
            7 => Some(Nehalem),
            f if f >= 8 => Some(Nehalem),
            _ => None,
        },
        Vendor::Zhaoxin => match (cpu.family, em) {
            (7, 5) => Some(if cpu.avx2 { Zen } else { Dunnington }),
            _ => Some(Nehalem),
        },
        Vendor::Unknown => None,
    }
}

/// The dispatcher's answer for a build on a CPU with `OPENBLAS_CORETYPE` as given (`None`:
/// unset): the table it runs and the name it reports.
pub fn chosen(build: &Build, cpu: &Cpu, coretype: Option<&str>) -> (Family, &'static str) {
    let picked = match coretype {
        Some(v) => forced(v, build.release),
        None => detected(cpu, build.release),
    };
    let family = picked.unwrap_or_else(|| fallback(cpu));
    let mut table = build.table(family);
    // 64-bit sanity check: a 32-bit-only table is replaced by Prescott's.
    if [Katmai, Coppermine, Northwood, Banias, Athlon]
        .iter()
        .any(|f| build.table(*f) == table)
    {
        table = build.table(Prescott);
    }
    (table, build.reported_name(table))
}

/// `gotoblas_dynamic_init`'s fallback when neither the variable nor the CPU table named a
/// family: the widest vector unit, ending at Prescott (not Nehalem, unlike the model ladder).
fn fallback(cpu: &Cpu) -> Family {
    match ladder(cpu, true, true) {
        Nehalem => Prescott,
        f => f,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// This project's build machine: AMD, CPUID.1:EAX 0x00B00F21 (family 0xF, extended
    /// family 0xB, model 2), AVX-512 with BF16, OS saving ZMM state (XCR0 0xE7), no AMX.
    /// Measured with a C program calling `__cpuid` and `xgetbv`.
    fn zen5() -> Cpu {
        Cpu::from_registers(&Registers {
            leaf0: [
                28,
                u32::from_le_bytes(*b"Auth"),
                u32::from_le_bytes(*b"cAMD"),
                u32::from_le_bytes(*b"enti"),
            ],
            leaf1: [0x00b0_0f21, 0, 0xfffa_3203, 0],
            leaf7: [0, 0xf1bf_07ab, 0x0040_5fc6, 0x0000_0110],
            leaf7_1: [0x30, 0, 0, 0],
            leaf_d: [0, 0, 0, 0],
            ext0: [0x8000_0028, 0, 0, 0],
            ext1: [0, 0, 0, 0],
            xcr0: 0xe7,
        })
    }

    fn tables(names: &[&str]) -> BTreeSet<Family> {
        names
            .iter()
            .map(|n| Family::of_symbol_suffix(n).unwrap())
            .collect()
    }

    /// The exported `gotoblas_*` tables of numpy 2.4's and scipy 1.17's OpenBLAS wheels
    /// (`nm -D`): a DYNAMIC_LIST build.
    fn list_build(release: Release) -> Build {
        Build::new(
            release,
            tables(&["PRESCOTT", "NEHALEM", "SANDYBRIDGE", "HASWELL", "SKYLAKEX"]),
        )
        .unwrap()
    }

    /// The exported tables of numpy 1.26.4's OpenBLAS 0.3.23.dev (`nm -D`): the default list.
    fn default_build() -> Build {
        Build::new(
            (0, 3, 23),
            tables(&[
                "ATHLON",
                "BANIAS",
                "BARCELONA",
                "BULLDOZER",
                "COOPERLAKE",
                "COPPERMINE",
                "CORE2",
                "EXCAVATOR",
                "HASWELL",
                "KATMAI",
                "NEHALEM",
                "NORTHWOOD",
                "PILEDRIVER",
                "PRESCOTT",
                "SANDYBRIDGE",
                "SAPPHIRERAPIDS",
                "SKYLAKEX",
                "STEAMROLLER",
                "ZEN",
            ]),
        )
        .unwrap()
    }

    #[test]
    fn cpu_flags_are_combined_like_the_dispatcher() {
        let c = zen5();
        assert_eq!(c.vendor, Vendor::Amd);
        assert_eq!((c.family, c.exfamily, c.model), (0xf, 0xb, 2));
        assert!(c.avx && c.avx2 && c.avx512 && c.avx512_bf16 && !c.amx_bf16);
    }

    /// Observed with threadpoolctl 3.8 `architecture` on this machine (OPENBLAS_CORETYPE as
    /// given; `None` = unset), numpy 2.4.6 (OpenBLAS 0.3.31) and scipy 1.17.1 (0.3.30)
    /// giving the same answers, numpy 1.26.4 (0.3.23.dev) the third column.
    #[test]
    fn answers_match_the_libraries_on_this_cpu() {
        let cases: &[(Option<&str>, &str, &str)] = &[
            (None, "SkylakeX", "Cooperlake"),
            (Some(""), "SkylakeX", "Cooperlake"),
            (Some("Prescott"), "Katmai", "Prescott"),
            (Some("katmai"), "Katmai", "Prescott"),
            (Some("Zen"), "Haswell", "Zen"),
            (Some("SkylakeX"), "SkylakeX", "SkylakeX"),
            (Some("Cooperlake"), "SkylakeX", "Cooperlake"),
            (Some("Haswell "), "SkylakeX", "Cooperlake"),
            (Some(" Haswell"), "SkylakeX", "Cooperlake"),
            (Some("HASWELL"), "Haswell", "Haswell"),
            (Some("Sandybridge"), "Sandybridge", "Sandybridge"),
            (Some("Nehalem"), "Nehalem", "Nehalem"),
            (Some("Core2"), "Katmai", "Core2"),
            (Some("Barcelona"), "Nehalem", "Barcelona"),
            (Some("Excavator"), "Sandybridge", "Excavator"),
            (Some("Atom"), "Nehalem", "Nehalem"),
            (Some("SapphireRapids"), "SkylakeX", "Cooperlake"),
            (Some("Bogus"), "SkylakeX", "Cooperlake"),
            (Some("Opteron_SSE3"), "Katmai", "Core2"),
            (Some("Opteron"), "Katmai", "Core2"),
        ];
        let cpu = zen5();
        for (coretype, new, old) in cases {
            for release in [(0, 3, 30), (0, 3, 31)] {
                let (_, name) = chosen(&list_build(release), &cpu, *coretype);
                assert_eq!(name, *new, "{coretype:?} on {release:?}");
            }
            let (_, name) = chosen(&default_build(), &cpu, *coretype);
            assert_eq!(name, *old, "{coretype:?} on 0.3.23");
        }
    }

    /// Intel CPUs, from `get_coretype`'s table (dynamic.c v0.3.28): Sapphire Rapids
    /// (family 6, extended model 8, model 15) with AMX takes its own tables from 0.3.24 and
    /// Cooperlake's before; Skylake-X (5/5) without BF16 takes SkylakeX; Haswell (3/12)
    /// without OS AVX support falls back to Nehalem.
    #[test]
    fn intel_models_follow_the_source_table() {
        let intel = |exmodel: u32,
                     model: u32,
                     avx: bool,
                     avx2: bool,
                     avx512: bool,
                     bf16: bool,
                     amx: bool| Cpu {
            vendor: Vendor::Intel,
            family: 6,
            exfamily: 0,
            model,
            exmodel,
            stepping: 0,
            sse3: true,
            three_dnow: false,
            avx,
            avx2,
            avx512,
            avx512_bf16: bf16,
            amx_bf16: amx,
        };
        let spr = intel(8, 15, true, true, true, true, true);
        assert_eq!(detected(&spr, (0, 3, 24)), Some(SapphireRapids));
        assert_eq!(detected(&spr, (0, 3, 23)), Some(Cooperlake));
        assert_eq!(
            detected(&intel(5, 5, true, true, true, false, false), (0, 3, 28)),
            Some(SkylakeX)
        );
        assert_eq!(
            detected(&intel(3, 12, false, false, false, false, false), (0, 3, 28)),
            Some(Nehalem)
        );
        // An extended model the table does not know: Prescott's rule before 0.3.25, none after.
        let unknown = intel(11, 3, true, true, false, false, false);
        assert_eq!(detected(&unknown, (0, 3, 24)), Some(Prescott));
        assert_eq!(detected(&unknown, (0, 3, 25)), None);
        // A DYNAMIC_LIST build without Sapphire Rapids tables reports SkylakeX for it.
        let (_, name) = chosen(&list_build((0, 3, 30)), &spr, None);
        assert_eq!(name, "SkylakeX");
        // Cooperlake cannot be forced before 0.3.22 (its name was outside the loop).
        assert_eq!(forced("cooperlake", (0, 3, 21)), None);
        assert_eq!(forced("cooperlake", (0, 3, 22)), Some(Cooperlake));
    }

    #[test]
    fn releases_parse_and_old_ones_are_not_modelled() {
        assert_eq!(release("0.3.31.188.0"), Some((0, 3, 31)));
        assert_eq!(release("0.3.23.dev"), Some((0, 3, 23)));
        assert_eq!(release("0.3"), None);
        assert!(Build::new((0, 3, 20), tables(&["PRESCOTT"])).is_none());
        assert!(Build::new((0, 3, 30), BTreeSet::new()).is_none());
    }
}
