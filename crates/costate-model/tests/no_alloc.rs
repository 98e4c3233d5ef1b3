//! Evaluation through a [`Workspace`] must not touch the heap: a counting allocator watches
//! this test's thread while values, Jacobian and Hessian are evaluated repeatedly.

use std::alloc::{GlobalAlloc, Layout, System};
use std::cell::Cell;

use costate_model::{BinaryOp, Function, Graph, UnaryOp};

struct Counting;

thread_local! {
    static ALLOCATIONS: Cell<usize> = const { Cell::new(0) };
}

// SAFETY: forwards every call to the system allocator unchanged; only counts.
unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        ALLOCATIONS.with(|c| c.set(c.get() + 1));
        // SAFETY: same contract as the caller's.
        unsafe { System.alloc(layout) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        // SAFETY: `ptr` came from `System.alloc` above.
        unsafe { System.dealloc(ptr, layout) }
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        ALLOCATIONS.with(|c| c.set(c.get() + 1));
        // SAFETY: same contract as the caller's.
        unsafe { System.realloc(ptr, layout, new_size) }
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

fn allocations() -> usize {
    ALLOCATIONS.with(|c| c.get())
}

#[test]
fn evaluation_does_not_allocate() {
    // A small pendulum-like right-hand side with every kind of instruction.
    let mut g = Graph::new();
    let t = g.input(0);
    let th = g.input(1);
    let om = g.input(2);
    let u = g.input(3);
    let s = g.unary(UnaryOp::Sin, th);
    let k = g.constant(-9.81);
    let grav = g.binary(BinaryOp::Mul, k, s);
    let two = g.constant(2.0);
    let damp = g.binary(BinaryOp::Pow, om, two);
    let half = g.constant(0.5);
    let r = g.binary(BinaryOp::Pow, u, half);
    let m = g.binary(BinaryOp::Max, r, t);
    let a = g.binary(BinaryOp::Sub, grav, damp);
    let f1 = g.binary(BinaryOp::Add, a, m);
    let e = g.binary(BinaryOp::Pow, u, th);
    let f2 = g.unary(UnaryOp::Abs, e);
    let f = Function::compile(&mut g, 4, &[om, f1, f2]);

    let mut ws = f.workspace();
    let mut out = vec![0.0; f.n_outputs()];
    let mut jac = vec![0.0; f.jacobian_pattern().len()];
    let mut hess = vec![0.0; f.hessian_pattern().len()];
    let weights = vec![1.0, -0.5, 2.0];
    let mut x = [0.1, 0.3, -0.2, 1.7];

    let before = allocations();
    for step in 0..100 {
        x[1] += 0.01 * f64::from(step);
        f.eval(&x, &mut out, &mut ws);
        f.eval_jacobian(&x, &mut jac, &mut ws);
        f.eval_with_jacobian(&x, &mut out, &mut jac, &mut ws);
        f.eval_hessian(&x, &weights, &mut hess, &mut ws);
    }
    let after = allocations();
    assert_eq!(after - before, 0, "evaluation allocated");
    assert!(out.iter().chain(&jac).chain(&hess).all(|v| v.is_finite()));
}
