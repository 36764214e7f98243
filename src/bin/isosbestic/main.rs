use ndarray_linalg::SVD;
fn main() {
    let a = ndarray::array![[1.0f64, 2.0], [3.0, 4.0], [5.0, 6.0]];
    let (_, s, _) = a.svd(false, false).unwrap();
    println!("{s}");
}
