use std::time::Instant;
fn main() {
    use septum::dsp::osc::{fill_harmonics, BLOCK};
    for h in [5usize, 9] {
        let mut c = vec![vec![0.0; BLOCK]; h];
        let mut s = vec![vec![0.0; BLOCK]; h];
        for _ in 0..3 {
            let t = Instant::now();
            for b in 0..(88 * 1024 / BLOCK) {
                fill_harmonics(0.13, 45000.0, b * BLOCK, BLOCK, &mut c, &mut s);
            }
            println!("h {h} fill 88 blocks {:?} {}", t.elapsed(), c[4][5]);
        }
    }
}
