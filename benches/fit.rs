//! Fitting speed (issue #3 targets: single-layer model fit of a 2048-pixel spectrum ≤ 1 ms
//! median on one core, bilayer ≤ 20 ms). Spectra are made by isopach's own transfer-matrix
//! code with seeded 0.3 % noise; figures go to docs/performance.md, "Fitting".

use criterion::{criterion_group, criterion_main, Criterion};
use isopach::fit::Fitter;
use isopach::optics::reflectance;
use isopach::recipe::{self, LoadedRecipe};
use isopach::spectrum::Spectrum;
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};
use std::hint::black_box;
use std::path::PathBuf;
use std::time::Duration;

fn loaded(film: &str) -> LoadedRecipe {
    let text = format!(
        "name = \"bench\"\n[wafer]\ndiameter_mm = 150\nedge_exclusion_mm = 3\n[pattern]\nkind = \"standard\"\nsites = 1\n[film]\n{film}\n"
    );
    let path = PathBuf::from("bench.toml");
    LoadedRecipe {
        recipe: recipe::parse(&text, &path).unwrap(),
        path,
        text,
    }
}

/// A 2048-pixel spectrum across `[lo, hi]` of the stack at `d`, with 0.3 % Gaussian noise.
fn spectrum(fitter: &Fitter, d: &[f64], lo: f64, hi: f64) -> Spectrum {
    let w: Vec<f64> = (0..2048)
        .map(|i| lo + (hi - lo) * i as f64 / 2047.0)
        .collect();
    let mut r = reflectance(&fitter.stack(d), &w, 0.0, 0.0);
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
    let noise = Normal::new(0.0, 0.003).unwrap();
    r.iter_mut().for_each(|v| *v += noise.sample(&mut rng));
    Spectrum {
        wavelength_nm: w,
        reflectance: r,
    }
}

fn single(c: &mut Criterion, name: &str, method: &str, min: f64, max: f64, d: f64) {
    let fitter = Fitter::from_recipe(&loaded(&format!(
        "ambient = \"air\"\nsubstrate = \"si\"\nlayers = [ {{ material = \"sio2\", nominal_nm = 1000, min_nm = {min}, max_nm = {max} }} ]\nwavelength_nm = [420, 980]\nmethod = \"{method}\""
    )))
    .unwrap();
    let s = spectrum(&fitter, &[d], 420.0, 980.0);
    let r = fitter.fit(&s);
    assert!(
        (r.layers[0].thickness_nm - d).abs() < 0.01 * d,
        "{name}: {r:?}"
    );
    measure(c, name, &fitter, &s);
}

/// Two figures per fit: wall-clock time, and the time the thread spent on a CPU, which is
/// the one-core cost even when the machine is shared and the wall clock includes waiting.
fn measure(c: &mut Criterion, name: &str, fitter: &Fitter, s: &Spectrum) {
    c.bench_function(&format!("{name}/wall"), |b| {
        b.iter(|| fitter.fit(black_box(s)))
    });
    if cpu_ns().is_some() {
        c.bench_function(&format!("{name}/cpu"), |b| {
            b.iter_custom(|iters| {
                let start = cpu_ns().unwrap_or(0);
                for _ in 0..iters {
                    black_box(fitter.fit(black_box(s)));
                }
                Duration::from_nanos(cpu_ns().unwrap_or(0).saturating_sub(start))
            })
        });
    }
}

/// Nanoseconds this thread has run on a CPU (POSIX `clock_gettime(CLOCK_THREAD_CPUTIME_ID)`,
/// declared here to keep the crate free of a libc dependency; Linux only).
#[cfg(target_os = "linux")]
fn cpu_ns() -> Option<u64> {
    #[repr(C)]
    struct Timespec {
        tv_sec: i64,
        tv_nsec: i64,
    }
    extern "C" {
        fn clock_gettime(clock: i32, tp: *mut Timespec) -> i32;
    }
    const CLOCK_THREAD_CPUTIME_ID: i32 = 3;
    let mut t = Timespec {
        tv_sec: 0,
        tv_nsec: 0,
    };
    // SAFETY: `t` is a valid, writable timespec; the call only writes to it.
    let rc = unsafe { clock_gettime(CLOCK_THREAD_CPUTIME_ID, &mut t) };
    (rc == 0).then(|| t.tv_sec as u64 * 1_000_000_000 + t.tv_nsec as u64)
}

#[cfg(not(target_os = "linux"))]
fn cpu_ns() -> Option<u64> {
    None
}

fn benches(c: &mut Criterion) {
    single(
        c,
        "model_sio2_2048px_100-3000nm",
        "model",
        100.0,
        3000.0,
        1234.0,
    );
    single(
        c,
        "model_sio2_2048px_1-15000nm",
        "model",
        1.0,
        15000.0,
        7777.0,
    );
    single(c, "fourier_sio2_2048px", "fourier", 100.0, 15000.0, 7777.0);
    single(c, "extrema_sio2_2048px", "extrema", 100.0, 15000.0, 7777.0);
    let fitter = Fitter::from_recipe(&loaded(
        "ambient = \"air\"\nsubstrate = \"si\"\nlayers = [\n { material = \"si3n4\", nominal_nm = 150, min_nm = 80, max_nm = 250 },\n { material = \"sio2\", nominal_nm = 500, min_nm = 300, max_nm = 800 },\n]\nwavelength_nm = [400, 1000]\nmethod = \"model\"",
    ))
    .unwrap();
    let s = spectrum(&fitter, &[163.0, 512.0], 400.0, 1000.0);
    let r = fitter.fit(&s);
    assert!(
        (r.layers[0].thickness_nm - 163.0).abs() < 2.0
            && (r.layers[1].thickness_nm - 512.0).abs() < 2.0,
        "{r:?}"
    );
    measure(c, "model_si3n4_sio2_2048px", &fitter, &s);
}

criterion_group! {
    name = fit;
    config = Criterion::default().without_plots().sample_size(40).measurement_time(Duration::from_secs(4));
    targets = benches
}
criterion_main!(fit);
