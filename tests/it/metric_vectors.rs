//! Vector distances against naive computations written out here (plain loops in f64, and
//! `f64::acos` of the cosine for the angle), the metric axioms, and the vector reader.

use proptest::prelude::*;
use waymark::ingest::vectors::{read_vectors, read_vectors_from, VectorFormat, VectorOptions};
use waymark::ingest::IngestError;
use waymark::metric::{vector_bytes, Metric, Norm, PreparedQuery, VectorMetric};

fn naive(norm: Norm, a: &[f32], b: &[f32]) -> f64 {
    let d = a.iter().zip(b).map(|(x, y)| f64::from(*x) - f64::from(*y));
    match norm {
        Norm::L1 => d.map(f64::abs).sum(),
        Norm::L2 => d.map(|x| x * x).sum::<f64>().sqrt(),
        Norm::Linf => d.fold(0.0, |m, x| m.max(x.abs())),
        Norm::Angular => {
            let dot: f64 = a
                .iter()
                .zip(b)
                .map(|(x, y)| f64::from(*x) * f64::from(*y))
                .sum();
            let na = a.iter().map(|x| f64::from(*x).powi(2)).sum::<f64>().sqrt();
            let nb = b.iter().map(|x| f64::from(*x).powi(2)).sum::<f64>().sqrt();
            // The documented policy for the zero vector.
            if na == 0.0 || nb == 0.0 {
                return if na == nb { 0.0 } else { 0.5 };
            }
            (dot / (na * nb)).clamp(-1.0, 1.0).acos() / std::f64::consts::PI
        }
    }
}

const NORMS: [Norm; 4] = [Norm::L1, Norm::L2, Norm::Linf, Norm::Angular];

fn vectors(dim: usize) -> impl Strategy<Value = (Vec<f32>, Vec<f32>, Vec<f32>)> {
    let v = || prop::collection::vec(-100.0f32..100.0, dim);
    (v(), v(), v())
}

fn triple() -> impl Strategy<Value = (Vec<f32>, Vec<f32>, Vec<f32>)> {
    // Dimensions around the 64-component blocks of the bounded loop.
    prop::sample::select(vec![1usize, 3, 8, 63, 64, 65, 130]).prop_flat_map(vectors)
}

proptest! {
    #[test]
    fn matches_naive((a, b, _) in triple()) {
        for norm in NORMS {
            let m = VectorMetric::new(norm, a.len()).unwrap();
            let q = m.prepare(&vector_bytes(&a));
            let d = q.distance(&vector_bytes(&b));
            let expected = naive(norm, &a, &b);
            // acos of a rounded cosine is itself off by up to ~1e-8 near 0; elsewhere exact.
            let tol = if norm == Norm::Angular { 1e-7 } else { 1e-9 * expected.max(1.0) };
            prop_assert!((d - expected).abs() <= tol, "{:?}: {} vs {}", norm, d, expected);
            prop_assert_eq!(q.distance_within(&vector_bytes(&b), d), Some(d));
            if d > 1e-6 {
                prop_assert_eq!(q.distance_within(&vector_bytes(&b), d * (1.0 - 1e-6)), None);
            }
        }
    }

    #[test]
    fn metric_axioms((a, b, c) in triple()) {
        for norm in NORMS {
            let m = VectorMetric::new(norm, a.len()).unwrap();
            let (a, b, c) = (vector_bytes(&a), vector_bytes(&b), vector_bytes(&c));
            let d = |x: &[u8], y: &[u8]| m.distance(x, y);
            let tol = 1e-9;
            prop_assert!(d(&a, &a).abs() <= tol);
            prop_assert!((d(&a, &b) - d(&b, &a)).abs() <= tol);
            prop_assert!(d(&a, &c) <= d(&a, &b) + d(&b, &c) + tol * d(&a, &c).max(1.0));
        }
    }
}

#[test]
fn angular_edge_cases() {
    let m = VectorMetric::new(Norm::Angular, 2).unwrap();
    let d = |a: &[f32], b: &[f32]| m.distance(&vector_bytes(a), &vector_bytes(b));
    assert_eq!(d(&[1.0, 0.0], &[2.0, 0.0]), 0.0);
    assert!((d(&[1.0, 0.0], &[-1.0, 0.0]) - 1.0).abs() < 1e-15);
    assert_eq!(d(&[0.0, 0.0], &[0.0, 0.0]), 0.0);
    assert_eq!(d(&[0.0, 0.0], &[3.0, 1.0]), 0.5);
    // Cosine distance 1 - cos is not a metric: 0°, 45°, 90° (common practice); angular is.
    let s = std::f32::consts::FRAC_1_SQRT_2;
    let cos = |a: [f32; 2], b: [f32; 2]| 1.0 - f64::from(a[0] * b[0] + a[1] * b[1]);
    assert!(cos([1.0, 0.0], [0.0, 1.0]) > cos([1.0, 0.0], [s, s]) + cos([s, s], [0.0, 1.0]));
    assert!(
        d(&[1.0, 0.0], &[0.0, 1.0]) <= d(&[1.0, 0.0], &[s, s]) + d(&[s, s], &[0.0, 1.0]) + 1e-12
    );
    assert!(VectorMetric::new(Norm::L2, 0).is_err());
}

fn csv() -> VectorOptions {
    VectorOptions {
        format: Some(VectorFormat::Delimited { delimiter: b',' }),
        header: false,
    }
}

fn record_error(e: IngestError) -> (u64, String) {
    match e {
        IngestError::Record { line, message, .. } => (line, message),
        other => panic!("expected a record error, got {other}"),
    }
}

#[test]
fn delimited_rows() {
    let v = read_vectors_from(
        "\u{FEFF}x,y\r\n1.5, 2\r\n\r\n-3,4e2\n".as_bytes(),
        "buoys.csv",
        &VectorOptions {
            header: true,
            ..csv()
        },
    )
    .unwrap();
    assert_eq!(v.dim, 2);
    assert_eq!(
        v.items,
        [vector_bytes(&[1.5, 2.0]), vector_bytes(&[-3.0, 400.0])]
    );
    assert_eq!(v.rows, ["1.5, 2", "-3,4e2"]);
    assert_eq!(v.lines, [2, 4]);
    // Tab guessed from the first row when no format is given.
    let v = read_vectors_from(
        "1\t2\t3\n4\t5\t6\n".as_bytes(),
        "v",
        &VectorOptions::default(),
    )
    .unwrap();
    assert_eq!((v.dim, v.items.len()), (3, 2));
}

#[test]
fn delimited_errors_name_line_and_column() {
    let cases: &[(&str, u64, &str)] = &[
        ("1,2\n3\n", 2, "1 values, but line 1 has 2"),
        ("1,2\n3,4,5\n", 2, "3 values"),
        ("1,2\n3,NaN\n", 2, "column 2: NaN"),
        ("1,2\n\n-inf,4\n", 3, "column 1: infinity"),
        ("1,abc\n", 1, "column 2: `abc` is not a number"),
        ("1,,2\n", 1, "column 2: empty"),
        ("1e39,2\n", 1, "outside the range of 32-bit floats"),
    ];
    for (text, line, what) in cases {
        let (l, m) = record_error(read_vectors_from(text.as_bytes(), "v.csv", &csv()).unwrap_err());
        assert_eq!(l, *line, "{text:?}: {m}");
        assert!(m.contains(what), "{text:?}: {m}");
    }
    assert!(matches!(
        read_vectors_from("\n".as_bytes(), "v.csv", &csv()),
        Err(IngestError::Empty { .. })
    ));
}

/// A `.npy` file laid out as NumPy's format documentation describes (version 1: magic,
/// version bytes, u16 header length, a dict literal padded with spaces and ending in `\n`).
fn npy(descr: &str, shape: &str, data: &[u8], major: u8) -> Vec<u8> {
    let mut h = format!("{{'descr': '{descr}', 'fortran_order': False, 'shape': {shape}, }}");
    let pre = if major == 1 { 10 } else { 12 };
    while (pre + h.len() + 1) % 64 != 0 {
        h.push(' ');
    }
    h.push('\n');
    let mut out = b"\x93NUMPY".to_vec();
    out.extend([major, 0]);
    if major == 1 {
        out.extend((h.len() as u16).to_le_bytes());
    } else {
        out.extend((h.len() as u32).to_le_bytes());
    }
    out.extend(h.as_bytes());
    out.extend(data);
    out
}

#[test]
fn npy_files() {
    let f4: Vec<u8> = [1.0f32, 2.0, 3.0, 4.5, 5.0, 6.0]
        .iter()
        .flat_map(|x| x.to_le_bytes())
        .collect();
    let f8: Vec<u8> = [1.0f64, 2.0, 3.0, 4.5, 5.0, 6.0]
        .iter()
        .flat_map(|x| x.to_le_bytes())
        .collect();
    let dir = tempfile::tempdir().unwrap();
    for (descr, data, major) in [("<f4", &f4, 1u8), ("<f8", &f8, 2u8)] {
        let path = dir.path().join(format!("v{major}.npy"));
        std::fs::write(&path, npy(descr, "(2, 3)", data, major)).unwrap();
        let v = read_vectors(&path, &VectorOptions::default()).unwrap();
        assert_eq!(v.dim, 3);
        assert_eq!(
            v.items,
            [
                vector_bytes(&[1.0, 2.0, 3.0]),
                vector_bytes(&[4.5, 5.0, 6.0])
            ]
        );
        assert_eq!(v.rows[1], "4.5,5,6");
    }
    let mut nan = f4.clone();
    nan[16..20].copy_from_slice(&f32::NAN.to_le_bytes());
    let (line, m) = record_error(
        read_vectors_from(
            &npy("<f4", "(2, 3)", &nan, 1)[..],
            "v.npy",
            &VectorOptions::default(),
        )
        .unwrap_err(),
    );
    assert_eq!(line, 2);
    assert!(m.contains("column 2: NaN"), "{m}");
    let refused = [
        npy(">f4", "(2, 3)", &f4, 1),
        npy("<i4", "(2, 3)", &f4, 1),
        npy("<f4", "(6,)", &f4, 1),
        npy("<f4", "(2, 4)", &f4, 1),
        npy("<f4", "(2, 3)", &f4[..20], 1),
        b"\x93NUMPY\x09\x00".to_vec(),
    ];
    for bytes in refused {
        let e = read_vectors_from(
            &bytes[..],
            "v.npy",
            &VectorOptions {
                format: Some(VectorFormat::Npy),
                header: false,
            },
        );
        assert!(matches!(e, Err(IngestError::Options { .. })), "{e:?}");
    }
}
