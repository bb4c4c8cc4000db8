//! Command implementations behind the thin CLI in src/main.rs. Each function takes plain option
//! structs, does the work through the library modules, and writes its outputs atomically.
pub mod bench;
pub mod count;
pub mod curvature;
pub mod demo;
pub mod distances;
pub mod fit;
pub mod inspect;
pub mod mock;
pub mod run;
pub mod sweep;
pub mod xi;

/// Run `f` on a pool of `threads` threads (0: rayon's default, all cores). The catalogue readers
/// and the sky conversion work on the current rayon pool, so a command reads and converts with
/// its own thread count.
pub fn on_threads<T: Send>(
    threads: usize,
    f: impl FnOnce() -> crate::Result<T> + Send,
) -> crate::Result<T> {
    crate::pairs::build_pool(threads)?.install(f)
}

/// How many threads to use: the flag, else SLURM_CPUS_PER_TASK, else all cores.
pub fn resolve_threads(flag: Option<usize>) -> usize {
    if let Some(n) = flag.filter(|&n| n > 0) {
        return n;
    }
    if let Some(n) = std::env::var("SLURM_CPUS_PER_TASK")
        .ok()
        .and_then(|v| v.trim().parse::<usize>().ok())
        .filter(|&n| n > 0)
    {
        return n;
    }
    std::thread::available_parallelism().map_or(1, |n| n.get())
}
