//! The background pool: engine work of threads marked background (a growing tree's merges)
//! runs on a thread pool of its own whose threads have the lowest OS priority.
//!
//! Sharing rayon's global pool, a merge of millions of rows keeps every worker busy and a
//! foreground build (an append's own segment) queues behind its tasks, so the appends made
//! while a large merge ran were the slowest. On their own pool, at a low priority, merges
//! use the cores the foreground leaves idle; the operating system gives the foreground the
//! rest. They run at nice 19, the weakest share short of `SCHED_IDLE` (under which a busy
//! foreground would starve the merges for good): at nice 10 they still took enough of the
//! cores to make a foreground build several times slower now and then. Their buffers get
//! no huge pages either (`boxwood_core::alloc`).

use std::cell::Cell;
use std::sync::OnceLock;

/// The niceness of the background threads: the highest there is on Linux, the lowest
/// priority that still shares the cores (the kernel clamps higher values to it).
pub const NICENESS: i32 = 19;

/// How many background pools there are: one for each merge that may run at once.
pub const POOLS: usize = 4;

thread_local! {
    static POOL_OF_THREAD: Cell<Option<usize>> = const { Cell::new(None) };
}

/// Mark the calling thread's later engine calls as background work on pool `pool` (each
/// concurrent merge has its own, so that a small merge never queues behind a large one's
/// tasks), or, with None, as foreground work again. Pools past [`POOLS`] are refused.
///
/// Marking a thread background also lowers its own priority to [`NICENESS`] (its work
/// between engine calls is a merge's too), for good: raising it back takes a privilege,
/// so only threads made for background work are marked.
pub fn set(pool: Option<usize>) -> Result<(), String> {
    match pool {
        Some(i) if i >= POOLS => Err(format!("background pool {i} out of range 0..{POOLS}")),
        _ => {
            if pool.is_some() {
                become_background();
            }
            POOL_OF_THREAD.with(|p| p.set(pool));
            Ok(())
        }
    }
}

/// Run `f`: on its background pool if the calling thread is marked background, else here.
pub fn run<T: Send>(f: impl FnOnce() -> T + Send) -> T {
    match POOL_OF_THREAD.with(|p| p.get()).and_then(pool) {
        Some(pool) => pool.install(f),
        None => f(),
    }
}

/// Background pool `i`, made on first use with as many threads as the global pool; None
/// if the operating system refuses the threads (the work then runs on the caller's).
fn pool(i: usize) -> Option<&'static rayon::ThreadPool> {
    static POOL: [OnceLock<Option<rayon::ThreadPool>>; POOLS] = [const { OnceLock::new() }; POOLS];
    POOL[i]
        .get_or_init(|| {
            rayon::ThreadPoolBuilder::new()
                .num_threads(rayon::current_num_threads())
                .thread_name(move |t| format!("boxwood-bg{i}-{t}"))
                .start_handler(|_| become_background())
                .build()
                .ok()
        })
        .as_ref()
}

/// Make the calling thread a background one for good: the lowest priority, and no huge
/// pages for its buffers (`boxwood_core::forgo_huge_pages_on_this_thread`: the compaction a
/// huge page may take first stalled the foreground's threads).
fn become_background() {
    lower_priority();
    boxwood_core::forgo_huge_pages_on_this_thread();
}

/// Lower the calling thread's priority to [`NICENESS`]. Linux applies `setpriority` to the
/// one thread whose id it is given; elsewhere it would change the whole process, so it is
/// left alone there. A refusal only leaves the priority as it was.
#[cfg(target_os = "linux")]
fn lower_priority() {
    // SAFETY: gettid takes no arguments, touches no memory and cannot fail; setpriority
    // reads only its three integer arguments (PRIO_PROCESS with a thread id names that one
    // thread on Linux) and reports failure through its return value, which is ignored.
    // Exercised by tests/test_growing_merges.py, which reads the threads' niceness back.
    unsafe {
        let tid = libc::syscall(libc::SYS_gettid) as libc::id_t;
        libc::setpriority(libc::PRIO_PROCESS, tid, NICENESS);
    }
}

#[cfg(not(target_os = "linux"))]
fn lower_priority() {}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn unmarked_threads_run_here_and_marked_ones_on_their_pool() {
        // On a thread of its own: marking lowers the marked thread's priority for good.
        std::thread::spawn(|| {
            let here = std::thread::current().id();
            assert_eq!(run(|| std::thread::current().id()), here);
            set(Some(1)).unwrap();
            let name = run(|| std::thread::current().name().map(str::to_owned));
            set(None).unwrap();
            assert!(name.unwrap().starts_with("boxwood-bg1-"));
            assert_eq!(run(|| std::thread::current().id()), here);
            assert!(set(Some(POOLS)).is_err());
        })
        .join()
        .unwrap();
    }
}
