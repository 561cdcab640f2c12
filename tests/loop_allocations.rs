//! A loop group's AC pass reuses its buffers (DEVELOPERS.md "Feedback links"): once an
//! evaluation has grown them, another AC pass over the same chain — what every
//! `spread` trial runs — allocates nothing. Counted by a global allocator that tallies
//! the calls made on this test's own thread.

use ampchain::network::Freq;
use ampchain::Chain;
use std::alloc::{GlobalAlloc, Layout, System};
use std::cell::Cell;

struct Counting;

thread_local! {
    static CALLS: Cell<usize> = const { Cell::new(0) };
}

fn count() {
    // `try_with`: nothing to count while the thread's storage is torn down.
    let _ = CALLS.try_with(|c| c.set(c.get() + 1));
}

unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        count();
        System.alloc(layout)
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        System.dealloc(ptr, layout)
    }
    unsafe fn alloc_zeroed(&self, layout: Layout) -> *mut u8 {
        count();
        System.alloc_zeroed(layout)
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        count();
        System.realloc(ptr, layout, new_size)
    }
}

#[global_allocator]
static ALLOCATOR: Counting = Counting;

#[test]
fn a_second_ac_pass_over_a_loop_allocates_nothing() {
    for name in [
        "feedback-pair.json",
        "shunt-feedback-stage.json",
        "three-stage-loop.json",
        "three-stage-loop-compensated.json",
    ] {
        let path = format!("{}/chains/{name}", env!("CARGO_MANIFEST_DIR"));
        let chain = Chain::from_json_str(&std::fs::read_to_string(path).expect("demo"))
            .expect("valid demo");
        let before = CALLS.with(Cell::get);
        let mut ev = chain.evaluate().expect("evaluates");
        // The counter counts: a first evaluation allocates its buffers.
        assert!(CALLS.with(Cell::get) > before, "{name}: nothing counted");
        for freq in [Freq::Midband, Freq::Hz(1e5)] {
            // The first pass at a frequency may grow a buffer; the second must not.
            for pass in 0..2 {
                let before = CALLS.with(Cell::get);
                ampchain::ac::solve_with_loops(
                    &chain,
                    freq,
                    ev.v_t,
                    &ev.dc,
                    &mut ev.ac,
                    &mut ev.load_gain,
                    &mut ev.loops,
                );
                let made = CALLS.with(Cell::get) - before;
                if pass == 1 {
                    assert_eq!(made, 0, "{name} at {freq:?}: {made} allocations");
                }
            }
        }
    }
}
