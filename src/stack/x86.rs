//! Reading constants that x86-64 code builds at run time: a string a compiler copies into a
//! static buffer with immediate and vector stores (an inlined `strcpy` of a literal), and an
//! integer passed beside a format string (`snprintf(buf, n, " MAX_THREADS=%d", 64)`).
//!
//! The code is decoded with `iced-x86` and followed in a straight line: `mov` of immediates
//! into general registers, `xor r, r`, 16-byte vector loads from fixed (RIP-relative)
//! addresses, and stores of those registers or of immediates to fixed addresses. Any other
//! instruction that writes a tracked register makes its value unknown. Nothing is executed;
//! the bytes of a vector load are read from the file through its program headers.

use std::collections::{BTreeMap, HashMap};

use iced_x86::{Decoder, DecoderOptions, Instruction, Mnemonic, OpKind, Register};

use crate::stack::elf::ElfFile;

/// A vector register's bytes, or a general register's value.
#[derive(Debug, Clone, Copy)]
enum Value {
    Int(u64),
    Bytes([u8; 16]),
}

/// The registers whose values are known at a point of the code.
#[derive(Default)]
struct State {
    known: HashMap<Register, Value>,
}

impl State {
    fn get_int(&self, r: Register) -> Option<u64> {
        match self.known.get(&r.full_register())? {
            Value::Int(v) => {
                let bits = r.size() * 8;
                Some(if bits >= 64 {
                    *v
                } else {
                    v & ((1u64 << bits) - 1)
                })
            }
            Value::Bytes(_) => None,
        }
    }

    fn set(&mut self, r: Register, v: Option<Value>) {
        let full = r.full_register();
        match v {
            Some(v) => {
                self.known.insert(full, v);
            }
            None => {
                self.known.remove(&full);
            }
        }
    }
}

fn is_vector_move(m: Mnemonic) -> bool {
    matches!(
        m,
        Mnemonic::Movdqa
            | Mnemonic::Movdqu
            | Mnemonic::Movaps
            | Mnemonic::Movups
            | Mnemonic::Movapd
            | Mnemonic::Movupd
            | Mnemonic::Lddqu
            | Mnemonic::Vmovdqa
            | Mnemonic::Vmovdqu
            | Mnemonic::Vmovaps
            | Mnemonic::Vmovups
            | Mnemonic::Vmovapd
            | Mnemonic::Vmovupd
    )
}

fn ends_straight_line(m: Mnemonic) -> bool {
    matches!(m, Mnemonic::Call | Mnemonic::Jmp | Mnemonic::Ret) || is_conditional_jump(m)
}

fn is_conditional_jump(m: Mnemonic) -> bool {
    matches!(
        m,
        Mnemonic::Ja
            | Mnemonic::Jae
            | Mnemonic::Jb
            | Mnemonic::Jbe
            | Mnemonic::Je
            | Mnemonic::Jne
            | Mnemonic::Jg
            | Mnemonic::Jge
            | Mnemonic::Jl
            | Mnemonic::Jle
            | Mnemonic::Jo
            | Mnemonic::Jno
            | Mnemonic::Jp
            | Mnemonic::Jnp
            | Mnemonic::Js
            | Mnemonic::Jns
            | Mnemonic::Jrcxz
            | Mnemonic::Jecxz
    )
}

fn is_general(r: Register) -> bool {
    r.is_gpr()
}

/// Follows one instruction: updates the registers and records fixed-address stores in
/// `memory` (a byte value, or `None` where something unknown was written).
fn step(
    elf: &ElfFile,
    ins: &Instruction,
    state: &mut State,
    memory: &mut BTreeMap<u64, Option<u8>>,
) {
    let m = ins.mnemonic();
    let op0 = ins.op0_kind();
    let fixed_memory = |i: &Instruction| {
        i.is_ip_rel_memory_operand()
            .then(|| i.ip_rel_memory_address())
    };
    if m == Mnemonic::Xor
        && op0 == OpKind::Register
        && ins.op1_kind() == OpKind::Register
        && ins.op0_register() == ins.op1_register()
    {
        state.set(ins.op0_register(), Some(Value::Int(0)));
        return;
    }
    if m == Mnemonic::Mov && op0 == OpKind::Register && is_general(ins.op0_register()) {
        let r = ins.op0_register();
        let v = match ins.op1_kind() {
            OpKind::Immediate8
            | OpKind::Immediate16
            | OpKind::Immediate32
            | OpKind::Immediate64
            | OpKind::Immediate32to64 => Some(ins.immediate(1)),
            OpKind::Register => state.get_int(ins.op1_register()),
            _ => None,
        };
        // An 8- or 16-bit write keeps the register's other bits: tracked only when known.
        let v = match (v, r.size()) {
            (Some(v), 1 | 2) => state.get_int(r.full_register()).map(|old| {
                let mask = (1u64 << (r.size() * 8)) - 1;
                (old & !mask) | (v & mask)
            }),
            (v, _) => v,
        };
        state.set(r, v.map(Value::Int));
        return;
    }
    if op0 == OpKind::Memory {
        let Some(at) = fixed_memory(ins) else {
            return;
        };
        let size = ins.memory_size().size();
        let bytes: Option<Vec<u8>> = if is_vector_move(m) && ins.op1_kind() == OpKind::Register {
            match state.known.get(&ins.op1_register()) {
                Some(Value::Bytes(b)) => Some(b[..size.min(16)].to_vec()),
                _ => None,
            }
        } else if m == Mnemonic::Mov {
            let v = match ins.op1_kind() {
                OpKind::Register => state.get_int(ins.op1_register()),
                OpKind::Immediate8
                | OpKind::Immediate16
                | OpKind::Immediate32
                | OpKind::Immediate8to64
                | OpKind::Immediate32to64 => Some(ins.immediate(1)),
                _ => None,
            };
            v.map(|v| v.to_le_bytes()[..size.min(8)].to_vec())
        } else {
            None
        };
        match bytes {
            Some(b) => {
                for (i, byte) in b.iter().enumerate() {
                    memory.insert(at.wrapping_add(i as u64), Some(*byte));
                }
            }
            None => {
                for i in 0..size.max(1) {
                    memory.insert(at.wrapping_add(i as u64), None);
                }
            }
        }
        return;
    }
    if op0 == OpKind::Register {
        let r = ins.op0_register();
        if is_vector_move(m) && r.is_xmm() && ins.op1_kind() == OpKind::Memory {
            let loaded = fixed_memory(ins)
                .and_then(|at| elf.bytes_at(at, 16))
                .and_then(|b| <[u8; 16]>::try_from(b).ok())
                .map(Value::Bytes);
            state.known.insert(r, loaded.unwrap_or(Value::Int(0)));
            if loaded.is_none() {
                state.known.remove(&r);
            }
            return;
        }
        // Anything else that writes a register: its value is no longer known.
        state.set(r, None);
    }
}

/// The C string a function writes into a fixed buffer before its first call, jump or return
/// (OpenBLAS's `openblas_get_config` copies its constant part this way before appending the
/// kernel name). `None` when no such string is written whole, with its terminating zero.
pub fn string_built_before_first_call(elf: &ElfFile, addr: u64, code: &[u8]) -> Option<Vec<u8>> {
    let mut decoder = Decoder::with_ip(64, code, addr, DecoderOptions::NONE);
    let mut state = State::default();
    let mut memory: BTreeMap<u64, Option<u8>> = BTreeMap::new();
    let mut ins = Instruction::default();
    while decoder.can_decode() {
        decoder.decode_out(&mut ins);
        if ins.is_invalid() || ends_straight_line(ins.mnemonic()) {
            break;
        }
        step(elf, &ins, &mut state, &mut memory);
    }
    let (&start, _) = memory.iter().next()?;
    let mut out = Vec::new();
    let mut at = start;
    loop {
        match memory.get(&at)? {
            Some(0) => return Some(out),
            Some(b) => out.push(*b),
            None => return None,
        }
        at = at.wrapping_add(1);
        if out.len() > 4096 {
            return None;
        }
    }
}

/// The System V argument registers, in order.
const ARGS: [Register; 6] = [
    Register::RDI,
    Register::RSI,
    Register::RDX,
    Register::RCX,
    Register::R8,
    Register::R9,
];

/// The integer passed right after a format string that contains `needle`, at any call in the
/// function (`snprintf(buf, 19, " MAX_THREADS=%d", 64)` → 64): the format's address comes
/// from a `lea reg, [rip + …]`, the integer from a `mov` of an immediate into the next
/// argument register, both before the call and after the previous one.
pub fn integer_after_format(elf: &ElfFile, addr: u64, code: &[u8], needle: &str) -> Option<u64> {
    let mut decoder = Decoder::with_ip(64, code, addr, DecoderOptions::NONE);
    let mut state = State::default();
    let mut pointers: HashMap<Register, u64> = HashMap::new();
    let mut scratch = BTreeMap::new();
    let mut ins = Instruction::default();
    while decoder.can_decode() {
        decoder.decode_out(&mut ins);
        if ins.is_invalid() {
            return None;
        }
        let m = ins.mnemonic();
        if m == Mnemonic::Call {
            for (i, reg) in ARGS.iter().enumerate() {
                let Some(&p) = pointers.get(reg) else {
                    continue;
                };
                let is_format = elf.c_string_at(p).is_some_and(|s| s.contains(needle));
                if let (true, Some(next)) = (is_format, ARGS.get(i + 1)) {
                    if let Some(v) = state.get_int(next.full_register()) {
                        return Some(v);
                    }
                }
            }
        }
        if ends_straight_line(m) {
            state = State::default();
            pointers.clear();
            continue;
        }
        if m == Mnemonic::Lea
            && ins.op0_kind() == OpKind::Register
            && ins.is_ip_rel_memory_operand()
        {
            let r = ins.op0_register().full_register();
            pointers.insert(r, ins.ip_rel_memory_address());
            state.set(r, None);
            continue;
        }
        if ins.op0_kind() == OpKind::Register {
            pointers.remove(&ins.op0_register().full_register());
        }
        step(elf, &ins, &mut state, &mut scratch);
    }
    None
}
