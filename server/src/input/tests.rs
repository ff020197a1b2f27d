//! Tests of the input layer: happy paths in every form, and one test per kind of bad
//! input asserting the `line:column` in the message.

use std::io::Write;
use std::path::PathBuf;

use super::*;
use crate::units::LengthUnit;

/// A temporary file with `content`; the directory lives as long as the guard.
fn file(name: &str, content: &str) -> (tempfile::TempDir, PathBuf) {
    let dir = tempfile::tempdir().expect("temp dir");
    let path = dir.path().join(name);
    let mut f = std::fs::File::create(&path).expect("create");
    f.write_all(content.as_bytes()).expect("write");
    (dir, path)
}

fn read(content: &str, unit: LengthUnit) -> Result<Points, InputError> {
    let name = if content.trim_start().starts_with('{') {
        "p.json"
    } else {
        "p.csv"
    };
    let (_d, p) = file(name, content);
    read_points(
        &p,
        &ReadOptions {
            length_unit: unit,
            progress: false,
        },
    )
}

fn err(content: &str, unit: LengthUnit) -> String {
    match read(content, unit) {
        Ok(p) => panic!("expected an error, got {p:?}"),
        Err(e) => e.to_string(),
    }
}

fn plane(p: Points) -> Vec<kinema_core::Point<2>> {
    match p {
        Points::Plane(s) => s.into_inner(),
        Points::Space(_) => panic!("expected 2D"),
    }
}

fn space(p: Points) -> Vec<kinema_core::Point<3>> {
    match p {
        Points::Space(s) => s.into_inner(),
        Points::Plane(_) => panic!("expected 3D"),
    }
}

const M: LengthUnit = LengthUnit::Metre;
const MM: LengthUnit = LengthUnit::Millimetre;

#[test]
fn csv_displacement_form_2d_in_mm_converts_exactly() {
    let p = read("id,x,y,ux,uy\nT1,12.5,0,1.5,-2\nT2, 100 ,50,0.25,3\n", MM).expect("reads");
    assert_eq!(p.dimension(), 2);
    let v = plane(p);
    assert_eq!(v.len(), 2);
    assert_eq!(v[0].id, "T1");
    // 12.5 mm is exactly 0.0125 m to the nearest double (one correctly rounded division).
    assert_eq!(v[0].x, [0.0125, 0.0]);
    assert_eq!(v[0].u, [0.0015, -0.002]);
    assert_eq!(v[1].x, [0.1, 0.05], "fields are trimmed");
    assert_eq!(v[1].sigma, None);
}

#[test]
fn csv_gen_field_form_3d_with_point_id_reads_every_digit() {
    // Three rows as tests/peer/gen_field.py writes them (--dim 3 --seed 7).
    let text = "point_id,x,y,z,ux,uy,uz\n\
1,62.509546660466697,17.944276019391509,15.513713804903871,0.0062294120656074719,0.00074249814559666782,0.0012011504994640415\n\
2,22.520718999059184,6.0033256982245087,17.471068907925236,-0.0030637685314998803,0.0025835648502027051,0.0004876109243533304\n\
3,0.52653045655747244,16.424568367655326,15.941388575040925,-0.0059314146508754771,0.0029188927295837695,-4.4209242217394338e-05\n";
    let v = space(read(text, M).expect("reads"));
    assert_eq!(v.len(), 3);
    assert_eq!(v[2].id, "3");
    // The 17-digit text reads back to the double Python wrote (same parse as std's).
    let exact = |t: &str| t.parse::<f64>().expect("number");
    assert_eq!(v[0].x[0], exact("62.509546660466697"));
    assert_eq!(v[2].u[2], exact("-4.4209242217394338e-05"));
}

#[test]
fn csv_reference_current_form_subtracts_in_declared_unit() {
    let text = "id,x_ref,y_ref,x_cur,y_cur\nA,1000.0,250.0,1000.5,249.75\n";
    let v = plane(read(text, MM).expect("reads"));
    assert_eq!(v[0].x, [1.0, 0.25]);
    // 1000.5 − 1000.0 = 0.5 exactly (Sterbenz lemma), then 0.5 mm → 0.0005 m.
    assert_eq!(v[0].u, [0.0005, -0.00025]);
    let text3 = "id,x_ref,y_ref,z_ref,x_cur,y_cur,z_cur\nB,1,2,3,1.5,2,2.75\n";
    let v = space(read(text3, M).expect("reads"));
    assert_eq!(v[0].u, [0.5, 0.0, -0.25]);
}

#[test]
fn csv_sigma_columns_in_any_order() {
    let text = "sigma_y,id,ux,uy,x,y,sigma_x\n0.5,P1,1,2,3,4,0.25\n";
    let v = plane(read(text, MM).expect("reads"));
    assert_eq!(v[0].x, [0.003, 0.004]);
    assert_eq!(v[0].sigma, Some([0.00025, 0.0005]));
    let p = read(text, MM).expect("reads");
    assert!(p.all_have_sigma());
    assert_eq!(p.id(0), Some("P1"));
}

#[test]
fn csv_bad_number_names_line_column_and_name() {
    let e = err("id,x,y,ux,uy\nT1,0,0,0,0\nT2,1,0,abc,0\n", M);
    assert!(
        e.ends_with("p.csv:3:4 (column ux): `abc` is not a number"),
        "{e}"
    );
}

#[test]
fn csv_nan_and_inf_are_rejected_with_their_line() {
    let e = err("id,x,y,ux,uy\nT1,nan,0,0,0\n", M);
    assert!(
        e.ends_with("p.csv:2:2 (column x): `nan` is not a finite number"),
        "{e}"
    );
    let e = err("id,x,y,ux,uy\nT1,0,0,0,0\nT2,0,1,0,-inf\n", M);
    assert!(
        e.ends_with("p.csv:3:5 (column uy): `-inf` is not a finite number"),
        "{e}"
    );
    let e = err("id,x,y,ux,uy\nT1,0,0,1e999,0\n", M);
    assert!(e.contains("p.csv:2:4 (column ux)"), "{e}");
}

#[test]
fn empty_file_and_header_only() {
    assert!(err("", M).ends_with("p.csv: the file is empty"));
    assert!(err("  \n\n", M).ends_with("p.csv: the file is empty"));
    let e = err("id,x,y,ux,uy\n", M);
    assert!(e.ends_with("p.csv: no points after the header"), "{e}");
}

#[test]
fn csv_too_few_and_too_many_fields() {
    let e = err("id,x,y,ux,uy\nT1,0,0,0,0\nT2,0,0,0\n", M);
    assert!(
        e.ends_with("p.csv:3: 4 fields, but the header has 5"),
        "{e}"
    );
    let e = err("id,x,y,ux,uy\nT1,0,0,0,0,9\n", M);
    assert!(
        e.ends_with("p.csv:2: 6 fields, but the header has 5"),
        "{e}"
    );
}

#[test]
fn csv_mixed_2d_3d_rows() {
    let e = err("id,x,y,ux,uy\nT1,0,0,0,0\nT2,0,0,5,0,0,1\n", M);
    assert!(
        e.ends_with("p.csv:3: 7 fields, but the header has 5; are 2D and 3D rows mixed?"),
        "{e}"
    );
}

#[test]
fn csv_unknown_duplicate_and_missing_columns() {
    let e = err("id,x,y,ux,uyy\nT1,0,0,0,0\n", M);
    assert!(e.contains("p.csv:1:5: unknown column `uyy`"), "{e}");
    let e = err("id,x,y,ux,ux\nT1,0,0,0,0\n", M);
    assert!(e.ends_with("p.csv:1:5: column `ux` appears twice"), "{e}");
    let e = err("id,x,y,z,ux,uy\nT1,0,0,0,0,0\n", M);
    assert!(e.contains("p.csv:1: missing column `uz`"), "{e}");
    let e = err("id,x,y,ux,uy,x_cur\nT1,0,0,0,0,0\n", M);
    assert!(e.contains("p.csv:1: the header mixes"), "{e}");
    let e = err("id,x,y,ux,uy,sigma_x\nT1,0,0,0,0,1\n", M);
    assert!(e.contains("p.csv:1: missing column `sigma_y`"), "{e}");
    let e = err("x,y,ux,uy\n0,0,0,0\n", M);
    assert!(e.contains("p.csv:1: missing column `id`"), "{e}");
}

#[test]
fn csv_duplicate_id_names_both_lines() {
    let e = err("id,x,y,ux,uy\nT1,0,0,0,0\nT2,1,0,0,0\nT1,0,1,0,0\n", M);
    assert!(
        e.ends_with("p.csv:4: duplicate point id `T1` (first on line 2)"),
        "{e}"
    );
}

#[test]
fn csv_invalid_id_and_non_positive_sigma() {
    let e = err("id,x,y,ux,uy\nT 1,0,0,0,0\n", M);
    assert!(e.contains("p.csv:2:1: invalid point id `T 1`"), "{e}");
    let e = err("id,x,y,ux,uy,sigma_x,sigma_y\nT1,0,0,0,0,1,0\n", M);
    assert!(
        e.ends_with("p.csv:2:7 (column sigma_y): standard deviation must be positive, got 0"),
        "{e}"
    );
}

#[test]
fn csv_full_covariance_2d_and_3d_in_mm_squared() {
    // 2D: cov_xx, cov_xy, cov_yy in mm², any column order; mm² → m² is ÷10⁶.
    let text = "id,x,y,ux,uy,cov_yy,cov_xy,cov_xx\nT1,0,0,1,2,4,1.5,9\nT2,1000,0,0,0,1,0,1\n";
    let p = read(text, MM).expect("reads");
    assert!(
        p.all_have_sigma(),
        "a covariance counts as stated precision"
    );
    assert!(p.all_have_precision());
    assert!(p.any_has_covariance());
    let v = plane(p);
    assert_eq!(v[0].sigma, None);
    assert_eq!(v[0].cov.as_deref(), Some(&[[9e-6, 1.5e-6], [1.5e-6, 4e-6]]));
    assert_eq!(v[1].cov.as_deref(), Some(&[[1e-6, 0.0], [0.0, 1e-6]]));
    // 3D in metres: taken as given, mirrored into the lower triangle.
    let text = "id,x,y,z,ux,uy,uz,cov_xx,cov_xy,cov_xz,cov_yy,cov_yz,cov_zz\n\
                B,1,2,3,0,0,0,4e-6,1e-6,-1e-6,5e-6,2e-6,6e-6\n";
    let v = space(read(text, M).expect("reads"));
    assert_eq!(
        v[0].cov.as_deref().copied(),
        Some([[4e-6, 1e-6, -1e-6], [1e-6, 5e-6, 2e-6], [-1e-6, 2e-6, 6e-6]])
    );
    // Without precision columns.
    let p = read("id,x,y,ux,uy\nT1,0,0,0,0\n", M).expect("reads");
    assert!(!p.all_have_sigma() && !p.all_have_precision() && !p.any_has_covariance());
}

#[test]
fn csv_per_epoch_sigma_combines_into_the_displacement_covariance() {
    // Source: propagation of variance for a difference of independent epochs,
    // C_u = C_ref + C_cur (Ghilani & Wolf, Adjustment Computations, ch. 6).
    let text = "id,x_ref,y_ref,x_cur,y_cur,sigma_x_ref,sigma_y_ref,sigma_x_cur,sigma_y_cur\n\
                A,1000,250,1000.5,249.75,3,1,4,2\n";
    let p = read(text, MM).expect("reads");
    assert!(p.all_have_sigma());
    let v = plane(p);
    // σ_x² = (3² + 4²) mm² = 25 mm² = 2.5e-5 m²; σ_y² = (1² + 2²) mm² = 5e-6 m².
    let c = v[0].cov.as_deref().copied().expect("covariance");
    assert!((c[0][0] - 2.5e-5).abs() < 1e-20, "{c:?}");
    assert!((c[1][1] - 5e-6).abs() < 1e-20, "{c:?}");
    assert_eq!(c[0][1], 0.0, "epochs are taken as uncorrelated");
    // 3D, displacement form, metres.
    let text = "id,x,y,z,ux,uy,uz,sigma_x_ref,sigma_y_ref,sigma_z_ref,sigma_x_cur,sigma_y_cur,sigma_z_cur\n\
                B,0,0,0,0,0,0,0.003,0.003,0.006,0.004,0.004,0.008\n";
    let v = space(read(text, M).expect("reads"));
    let c = v[0].cov.as_deref().copied().expect("covariance");
    for (k, want) in [2.5e-5, 2.5e-5, 1e-4].into_iter().enumerate() {
        assert!((c[k][k] - want).abs() < 1e-18, "{c:?}");
    }
}

#[test]
fn csv_covariance_errors_name_line_and_columns() {
    // Missing entry.
    let e = err("id,x,y,ux,uy,cov_xx,cov_xy\nT1,0,0,0,0,1,0\n", M);
    assert!(e.contains("p.csv:1: missing column `cov_yy`"), "{e}");
    // z entry in a 2D file.
    let e = err(
        "id,x,y,ux,uy,cov_xx,cov_xy,cov_yy,cov_zz\nT1,0,0,0,0,1,0,1,1\n",
        M,
    );
    assert!(e.contains("p.csv:1: column `cov_zz` in a 2D file"), "{e}");
    // Two forms of precision.
    let e = err(
        "id,x,y,ux,uy,sigma_x,sigma_y,cov_xx,cov_xy,cov_yy\nT1,0,0,0,0,1,1,1,0,1\n",
        M,
    );
    assert!(e.contains("p.csv:1: give one form of precision"), "{e}");
    let e = err(
        "id,x,y,ux,uy,sigma_x_ref,sigma_y_ref,sigma_x_cur\nT1,0,0,0,0,1,1,1\n",
        M,
    );
    assert!(e.contains("p.csv:1: missing column `sigma_y_cur`"), "{e}");
    // Not positive definite on line 3 (|cov_xy| > √(cov_xx·cov_yy)): names line and columns.
    let e = err(
        "id,x,y,ux,uy,cov_xx,cov_xy,cov_yy\nT1,0,0,0,0,1,0,1\nT2,1,0,0,0,1,2,1\n",
        MM,
    );
    assert!(
        e.contains("p.csv:3: columns 6 ff. (cov_xx, cov_xy, cov_yy): covariance `point `T2` cov`"),
        "{e}"
    );
    // Singular (perfect correlation).
    let e = err("id,x,y,ux,uy,cov_xx,cov_xy,cov_yy\nT1,0,0,0,0,1,1,1\n", MM);
    assert!(
        e.contains("p.csv:2: columns 6 ff.") && e.contains("singular"),
        "{e}"
    );
    // Not a number / not finite, with line:column.
    let e = err("id,x,y,ux,uy,cov_xx,cov_xy,cov_yy\nT1,0,0,0,0,1,nan,1\n", M);
    assert!(
        e.contains("p.csv:2:7 (column cov_xy): `nan` is not a finite number"),
        "{e}"
    );
    // Non-positive per-epoch standard deviation.
    let e = err(
        "id,x,y,ux,uy,sigma_x_ref,sigma_y_ref,sigma_x_cur,sigma_y_cur\nT1,0,0,0,0,1,1,-1,1\n",
        M,
    );
    assert!(
        e.ends_with("p.csv:2:8 (column sigma_x_cur): standard deviation must be positive, got -1"),
        "{e}"
    );
}

#[test]
fn json_full_covariance_and_per_epoch_sigma() {
    let text = r#"{"length_unit": "mm", "points": [
  {"id": "A", "x": 0, "y": 0, "ux": 1, "uy": 2, "cov_xx": 9, "cov_xy": 1.5, "cov_yy": 4},
  {"id": "B", "x": 1000, "y": 0, "ux": 0, "uy": 0,
   "sigma_x_ref": 3, "sigma_y_ref": 1, "sigma_x_cur": 4, "sigma_y_cur": 2}
]}"#;
    let p = read(text, MM).expect("reads");
    assert!(p.all_have_sigma());
    let v = plane(p);
    assert_eq!(v[0].cov.as_deref(), Some(&[[9e-6, 1.5e-6], [1.5e-6, 4e-6]]));
    let c = v[1].cov.as_deref().copied().expect("combined");
    // (3² + 4²) mm² and (1² + 2²) mm² (independent epochs, Ghilani & Wolf ch. 6).
    assert!((c[0][0] - 2.5e-5).abs() < 1e-20 && (c[1][1] - 5e-6).abs() < 1e-20);
    assert_eq!(c[0][1], 0.0);
    let text = r#"{"points": [{"id": "C", "x": 0, "y": 0, "z": 0, "ux": 0, "uy": 0, "uz": 0,
  "cov_xx": 4e-6, "cov_xy": 1e-6, "cov_xz": 0, "cov_yy": 5e-6, "cov_yz": 2e-6, "cov_zz": 6e-6}]}"#;
    let v = space(read(text, M).expect("reads"));
    assert_eq!(v[0].cov.as_deref().copied().expect("cov")[2][1], 2e-6);
}

#[test]
fn json_covariance_errors_carry_line_and_column() {
    let e = err(
        "{\"points\": [\n{\"id\": 1, \"x\": 0, \"y\": 0, \"ux\": 0, \"uy\": 0, \"cov_xx\": 1, \"cov_yy\": 1}\n]}",
        M,
    );
    assert!(
        e.contains("p.json:3:1: points[0] (`1`): give cov_xx, cov_xy, cov_yy together"),
        "{e}"
    );
    let e = err(
        "{\"points\": [\n{\"id\": 1, \"x\": 0, \"y\": 0, \"ux\": 0, \"uy\": 0, \"sigma_x\": 1, \"sigma_y\": 1, \"cov_xx\": 1, \"cov_xy\": 0, \"cov_yy\": 1}\n]}",
        M,
    );
    assert!(
        e.contains("p.json:3:1:") && e.contains("one form of precision"),
        "{e}"
    );
    let e = err(
        "{\"points\": [\n{\"id\": 1, \"x\": 0, \"y\": 0, \"ux\": 0, \"uy\": 0, \"cov_xx\": 1, \"cov_xy\": 3, \"cov_yy\": 1}\n]}",
        M,
    );
    assert!(
        e.contains("p.json:3:1: points[0]: covariance `point `1` cov` is invalid"),
        "{e}"
    );
    let e = err(
        "{\"points\": [\n{\"id\": 1, \"x\": 0, \"y\": 0, \"ux\": 0, \"uy\": 0, \"cov_xx\": 1, \"cov_xy\": 0, \"cov_yy\": 1, \"cov_zz\": 1}\n]}",
        M,
    );
    assert!(e.contains("give cov_xx, cov_xy, cov_yy together"), "{e}");
    let e = err(
        "{\"points\": [\n{\"id\": 1, \"x\": 0, \"y\": 0, \"ux\": 0, \"uy\": 0, \"sigma_x_ref\": 1, \"sigma_y_ref\": 1, \"sigma_x_cur\": 0, \"sigma_y_cur\": 1}\n]}",
        M,
    );
    assert!(
        e.contains("p.json:3:1:")
            && e.contains("sigma_x_cur must be a positive standard deviation, got 0"),
        "{e}"
    );
}

#[test]
fn json_gen_field_shape_with_numeric_ids() {
    // As tests/peer/gen_field.py --format json writes it (-n 2 --seed 7).
    let text = r#"{"points":[{"id":1,"x":62.5095466604667,"y":17.94427601939151,"ux":0.006202691101924294,"uy":0.0009779860665866732},{"id":2,"x":77.56856902451935,"y":4.504143799811837,"ux":0.00820484460996524,"uy":0.002405395013674279}]}"#;
    let v = plane(read(text, M).expect("reads"));
    assert_eq!(v.len(), 2);
    assert_eq!(v[0].id, "1");
    assert_eq!(v[1].id, "2");
    assert_eq!(v[1].u[1], 0.002405395013674279);
}

#[test]
fn json_3d_with_unit_string_ids_and_sigma() {
    let text = r#"{"points": [
  {"id": "W-1", "x": 12.5, "y": 0, "z": 1, "ux": 1, "uy": 2, "uz": 3,
   "sigma_x": 0.5, "sigma_y": 0.5, "sigma_z": 1}
], "length_unit": "mm"}"#;
    let v = space(read(text, MM).expect("reads"));
    assert_eq!(v[0].id, "W-1");
    assert_eq!(v[0].x, [0.0125, 0.0, 0.001]);
    assert_eq!(v[0].u, [0.001, 0.002, 0.003]);
    assert_eq!(v[0].sigma, Some([0.0005, 0.0005, 0.001]));
}

#[test]
fn json_unit_disagreeing_with_flag_is_an_error_with_position() {
    let text = "{\"length_unit\": \"mm\",\n \"points\": []}";
    let e = err(text, M);
    assert!(
        e.ends_with(
            "p.json:1:20: the file declares length_unit `mm` but --length-unit is `m`; make them agree"
        ),
        "{e}"
    );
    let e = err("{\"length_unit\": \"cm\", \"points\": []}", M);
    assert!(
        e.contains("p.json:1:20: length_unit must be `m` or `mm`, got `cm`"),
        "{e}"
    );
}

#[test]
fn json_malformed_values_carry_line_and_column() {
    let text = "{\"points\": [\n  {\"id\": 1, \"x\": 0, \"y\": 0, \"ux\": 0, \"uy\": 0},\n  {\"id\": 2, \"x\": 1, \"y\": 0, \"ux\": \"abc\", \"uy\": 0}\n]}";
    let e = err(text, M);
    assert!(
        e.contains("p.json:3:39: invalid type: string \"abc\", expected f64"),
        "{e}"
    );
    let e = err("{\"points\": [\n {\"id\": 1, \"x\": NaN}]}", M);
    assert!(e.contains("p.json:2:"), "{e}");
    let e = err(
        "{\"points\": [{\"id\": 1, \"x\": 0, \"y\": 0, \"ux\": 0, \"uy\": 0, \"uxx\": 1}]}",
        M,
    );
    assert!(
        e.contains("p.json:1:") && e.contains("unknown field `uxx`"),
        "{e}"
    );
    let e = err("{\"points\": [], \"extra\": 1}", M);
    assert!(e.contains("unknown member `extra`"), "{e}");
    let e = err(
        "{\"points\": [{\"id\": 1.5, \"x\": 0, \"y\": 0, \"ux\": 0, \"uy\": 0}]}",
        M,
    );
    assert!(
        e.contains("expected an identifier (a string or an integer)"),
        "{e}"
    );
}

#[test]
fn json_mixed_dimensions_duplicates_and_empty() {
    let text = "{\"points\": [\n{\"id\": 1, \"x\": 0, \"y\": 0, \"ux\": 0, \"uy\": 0},\n{\"id\": 2, \"x\": 0, \"y\": 0, \"z\": 0, \"ux\": 0, \"uy\": 0, \"uz\": 0}\n]}";
    let e = err(text, M);
    // Shape problems found after a point was read are reported just past it: here the
    // offending point is the last, so the position is the closing `]` on line 4.
    assert!(
        e.contains("p.json:4:1: points[1] (`2`) is 3D but points[0] is 2D"),
        "{e}"
    );
    let text = "{\"points\": [\n{\"id\": \"A\", \"x\": 0, \"y\": 0, \"ux\": 0, \"uy\": 0},\n{\"id\": \"A\", \"x\": 1, \"y\": 0, \"ux\": 0, \"uy\": 0},\n{\"id\": \"B\", \"x\": 2, \"y\": 0, \"ux\": 0, \"uy\": 0}\n]}";
    let e = err(text, M);
    // Not the last point: reported just past its separating comma, on the next line.
    assert!(
        e.contains("p.json:4:1:") && e.contains("duplicate point id `A` (first at points[0])"),
        "{e}"
    );
    let e = err("{\"points\": []}", M);
    assert!(e.ends_with("p.json: no points after the header"), "{e}");
    let e = err("{\"length_unit\": \"m\"}", M);
    assert!(e.contains("missing field `points`"), "{e}");
}

#[test]
fn elements_csv_and_json() {
    let (_d, p) = file("e.csv", "element_id,v0,v1,v2\nE1,T1,T2,T3\nE2,T2,T3,T4\n");
    let e = read_elements(&p).expect("reads");
    assert_eq!(
        e[1],
        ElementRow {
            id: "E2".into(),
            vertices: vec!["T2".into(), "T3".into(), "T4".into()]
        }
    );
    let (_d, p) = file(
        "e.json",
        r#"{"elements": [{"id": 7, "vertices": [1, 2, "T3", 4]}]}"#,
    );
    let e = read_elements(&p).expect("reads");
    assert_eq!(e[0].id, "7");
    assert_eq!(e[0].vertices, ["1", "2", "T3", "4"]);
}

#[test]
fn elements_bad_inputs_name_their_position() {
    let bad = |name: &str, text: &str| {
        let (_d, p) = file(name, text);
        read_elements(&p).expect_err("should fail").to_string()
    };
    let e = bad("e.csv", "element_id,v0,v1,v2\nE1,T1,T2,T3\nE1,T2,T3,T4\n");
    assert!(
        e.ends_with("e.csv:3: duplicate element id `E1` (first on line 2)"),
        "{e}"
    );
    let e = bad("e.csv", "element_id,v0,v1,v2,v4\n");
    assert!(e.contains("e.csv:1:5: unknown column `v4`"), "{e}");
    let e = bad("e.csv", "element_id,v0,v1\nE1,T1,T2\n");
    assert!(e.ends_with("e.csv:1: missing column `v2`"), "{e}");
    let e = bad("e.csv", "element_id,v0,v1,v2,v3\nE1,T1,T2,T3,\n");
    assert!(e.contains("e.csv:2:5: invalid point id ``"), "{e}");
    let e = bad("e.csv", "element_id,v0,v1,v2\nE1,T1,T2\n");
    assert!(
        e.ends_with("e.csv:2: 3 fields, but the header has 4"),
        "{e}"
    );
    let e = bad(
        "e.json",
        "{\"elements\": [\n{\"id\": \"E1\", \"vertices\": [\"A\", \"B\", \"C\"]},\n{\"id\": \"E2\", \"vertices\": [\"A\", \"B\", \"C\", \"D\"]}]}",
    );
    assert!(
        e.contains("e.json:3:") && e.contains("triangles and tetrahedra are mixed"),
        "{e}"
    );
    let e = bad(
        "e.json",
        "{\"elements\": [{\"id\": \"E1\", \"vertices\": [\"A\", \"B\"]}]}",
    );
    assert!(e.contains("e.json:1:") && e.contains("2 vertices"), "{e}");
}

#[test]
fn groups_csv_and_json() {
    let (_d, p) = file(
        "g.csv",
        "group,point_id\nNorth,T1\nSouth,T5\nNorth,T2\nNorth,T3\nSouth,T6\nSouth,T7\n",
    );
    let g = read_groups(&p).expect("reads");
    assert_eq!(g.len(), 2);
    assert_eq!(
        g[0],
        GroupRows {
            name: "North".into(),
            point_ids: vec!["T1".into(), "T2".into(), "T3".into()]
        }
    );
    assert_eq!(g[1].point_ids, ["T5", "T6", "T7"]);
    let (_d, p) = file(
        "g.json",
        r#"{"groups": [{"name": "G1", "point_ids": [1, 2, "T3"]}]}"#,
    );
    let g = read_groups(&p).expect("reads");
    assert_eq!(g[0].point_ids, ["1", "2", "T3"]);
}

#[test]
fn groups_bad_inputs_name_their_position() {
    let bad = |name: &str, text: &str| {
        let (_d, p) = file(name, text);
        read_groups(&p).expect_err("should fail").to_string()
    };
    let e = bad("g.csv", "group,point_id\nG,T1\nG,T2\nG,T1\n");
    assert!(
        e.ends_with("g.csv:4: duplicate point in group `G` `T1` (first on line 2)"),
        "{e}"
    );
    let e = bad("g.csv", "group,point\nG,T1\n");
    assert!(e.contains("g.csv:1:2: unknown column `point`"), "{e}");
    let e = bad("g.csv", "group,point_id\n");
    assert!(e.ends_with("g.csv: no groups after the header"), "{e}");
    let e = bad(
        "g.json",
        "{\"groups\": [\n{\"name\": \"G\", \"point_ids\": [\"A\", \"A\"]}]}",
    );
    assert!(
        e.contains("g.json:2:") && e.contains("appears twice in group `G`"),
        "{e}"
    );
    let e = bad(
        "g.json",
        "{\"groups\": [{\"name\": \"G\", \"point_ids\": []}]}",
    );
    assert!(e.contains("no point_ids"), "{e}");
}

#[test]
fn missing_file_is_an_io_error() {
    let e = read_points(
        std::path::Path::new("/nonexistent/kinema/points.csv"),
        &ReadOptions {
            length_unit: M,
            progress: false,
        },
    )
    .expect_err("missing");
    assert!(!e.is_bad_input());
    assert!(
        e.to_string()
            .starts_with("/nonexistent/kinema/points.csv: cannot read")
    );
}

#[test]
fn demo_data_reads_in_both_formats() {
    let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../demo-requests/offline");
    let opts = ReadOptions {
        length_unit: MM,
        progress: false,
    };
    let csv = read_points(&dir.join("points.csv"), &opts).expect("points.csv");
    let json = read_points(&dir.join("points.json"), &opts).expect("points.json");
    assert_eq!(
        csv, json,
        "the CSV and JSON demo files hold the same points"
    );
    assert_eq!(csv.len(), 40);
    assert!(csv.all_have_sigma());
    let elements = read_elements(&dir.join("elements.csv")).expect("elements.csv");
    assert_eq!(elements.len(), 56);
    let groups = read_groups(&dir.join("groups.csv")).expect("groups.csv");
    assert_eq!(groups.len(), 8);
    assert!(groups.iter().all(|g| g.point_ids.len() == 6));
}
