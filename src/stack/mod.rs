//! Pure readers for the numerical software stack: text and bytes in, typed facts out. The
//! collectors in [`crate::collect::python`], [`crate::collect::native`] and
//! [`crate::collect::gpu`] find the files; everything here only interprets them, so each reader
//! is tested on fixtures without touching the machine.
//!
//! Nothing here imports Python or loads a library: versions and build options are read from
//! metadata files, generated sources, headers and the bytes of shared objects.

pub mod blas;
pub mod elf;
pub mod framework;
pub mod gpu;
pub mod ldcache;
pub mod openblas_core;
pub mod python;
pub mod x86;
