//! Parsing throughput of lockfiles: `cargo run --release --example parse_bench -- FILE...`.
//! For each file, prints its format, packages, size and the median parse throughput in MB/s
//! over repeated parses of the text already in memory (reading is measured separately by
//! `benches/perf.py`).

use std::time::Instant;

use runprint::lockfile::Format;

fn main() {
    for arg in std::env::args().skip(1) {
        let path = std::path::Path::new(&arg);
        let name = path
            .file_name()
            .and_then(|n| n.to_str())
            .unwrap_or_default();
        let Some(format) = Format::detect(name) else {
            eprintln!("{arg}: not a lockfile runprint reads");
            continue;
        };
        let text = std::fs::read_to_string(path).expect("readable lockfile");
        let companion = format
            .companion()
            .and_then(|c| std::fs::read_to_string(path.with_file_name(c)).ok());
        let parse = || {
            format
                .parse_with_companion(&text, &arg, companion.as_deref().map(|t| (t, "companion")))
                .expect("parses")
        };
        let packages = parse().packages.len();
        let bytes = text.len() + companion.as_ref().map_or(0, String::len);
        let runs = (50_000_000 / bytes.max(1)).clamp(5, 200);
        let mut times: Vec<f64> = (0..runs)
            .map(|_| {
                let t = Instant::now();
                std::hint::black_box(parse());
                t.elapsed().as_secs_f64()
            })
            .collect();
        times.sort_by(|a, b| a.total_cmp(b));
        let median = times[times.len() / 2];
        println!(
            "{}\t{}\t{}\t{}\t{:.1}",
            format.ecosystem(),
            arg,
            packages,
            bytes,
            bytes as f64 / median / 1e6
        );
    }
}
