//! A boundary around third-party parsers given outside input (the `time`
//! crate's format descriptions, the `parquet` crate's decoder). Fuzzing found
//! inputs on which they panic — a debug assertion in `time` 0.3.55, a shift
//! that overflows in `parquet` 60.1 when overflow checks are on — so a panic
//! inside the boundary becomes an error for the caller to name the file with,
//! printed by nobody (the one-line error stays one line). A panic anywhere
//! else still goes to the hook that was installed before (the default
//! message, or a fuzzer's abort).

use std::cell::Cell;
use std::panic::{self, AssertUnwindSafe};
use std::sync::Once;

thread_local! {
    static INSIDE: Cell<bool> = const { Cell::new(false) };
}

static HOOK: Once = Once::new();

/// Runs `f`, a call into a third-party parser; a panic in it is returned as
/// `Err` with its message.
///
/// # Errors
/// The panic's message.
pub fn third_party<T>(f: impl FnOnce() -> T) -> Result<T, String> {
    HOOK.call_once(|| {
        let earlier = panic::take_hook();
        panic::set_hook(Box::new(move |info| {
            if !INSIDE.with(Cell::get) {
                earlier(info);
            }
        }));
    });
    let was = INSIDE.with(|c| c.replace(true));
    let r = panic::catch_unwind(AssertUnwindSafe(f));
    INSIDE.with(|c| c.set(was));
    r.map_err(|p| {
        p.downcast_ref::<&str>()
            .map(|s| (*s).to_owned())
            .or_else(|| p.downcast_ref::<String>().cloned())
            .unwrap_or_else(|| "a library failed on this input".to_owned())
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_panic_inside_becomes_an_error_and_outside_stays_a_panic() {
        assert_eq!(third_party(|| 7), Ok(7));
        let e = third_party(|| -> u8 { panic!("bad footer") });
        assert_eq!(e, Err("bad footer".to_owned()));
        // Nested: the inner boundary restores the outer one's state.
        let outer = third_party(|| {
            let _ = third_party(|| 1);
            panic!("still inside")
        });
        assert!(outer.is_err());
        assert!(std::panic::catch_unwind(|| panic!("outside")).is_err());
    }
}
