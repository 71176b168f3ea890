//! `[vessel]`: shapes, sizes, strapping tables and what the kernel's
//! geometry check refuses.

use super::*;

#[test]
fn negative_and_zero_diameter() {
    let text = edit(MINIMAL, "value = 1.6", "value = -1.6");
    let e = err(&text);
    assert_eq!(
        e.to_string(),
        format!(
            "plant.toml:{}: [vessel] diameter: must be positive, got -1.6 m",
            line_of(&text, "-1.6")
        )
    );
    let text = edit(MINIMAL, "value = 1.6", "value = 0");
    let e = err(&text);
    check(
        &e,
        &text,
        "diameter",
        "[vessel] diameter",
        &["must be positive, got 0 m"],
    );
    // In other units the SI value is shown too.
    let text = edit(
        MINIMAL,
        "value = 2.0, unit = \"m\"",
        "value = -3, unit = \"ft\"",
    );
    let e = err(&text);
    check(
        &e,
        &text,
        "height",
        "[vessel] height",
        &["got -3 ft (= -0.9144 m)"],
    );
}

#[test]
fn dish_deeper_than_the_radius_is_the_kernel_error() {
    let text = edit(
        EXAMPLE,
        "bottom_depth = { value = 0.25",
        "bottom_depth = { value = 0.9",
    );
    let e = err(&text);
    check(
        &e,
        &text,
        "bottom_depth",
        "[vessel] bottom_depth",
        &[
            holdup_kernel::Error::GeometryDishTooDeep.message(),
            "0.9 m",
            "radius 0.8 m",
        ],
    );
    // A cone may be deeper than the radius.
    let text = edit(EXAMPLE, "bottom = \"dished\"", "bottom = \"cone\"");
    let text = edit(
        &text,
        "bottom_depth = { value = 0.25",
        "bottom_depth = { value = 0.9",
    );
    assert_eq!(
        ok(&text).shape,
        Shape::VerticalCylinder {
            diameter: 1.6,
            height: 2.0,
            bottom: Bottom::Cone { height: 0.9 }
        }
    );
    // Flat bottom with a depth: refused at the depth.
    let text = edit(EXAMPLE, "bottom = \"dished\"", "bottom = \"flat\"");
    let e = err(&text);
    check(
        &e,
        &text,
        "bottom_depth",
        "[vessel] bottom_depth",
        &["not used by bottom \"flat\""],
    );
    // Dished without a depth: refused, naming the bottom line.
    let text = edit(
        EXAMPLE,
        "bottom_depth = { value = 0.25, unit = \"m\" }\n",
        "",
    );
    let e = err(&text);
    check(
        &e,
        &text,
        "bottom = ",
        "[vessel] bottom_depth",
        &["missing"],
    );
}

#[test]
fn keys_not_used_by_the_shape() {
    let text = edit(
        MINIMAL,
        "shape = \"vertical-cylinder\"",
        "shape = \"sphere\"",
    );
    let e = err(&text);
    check(
        &e,
        &text,
        "height",
        "[vessel] height",
        &["not used by shape sphere; keys of shape sphere: shape, diameter"],
    );
    let text = edit(
        MINIMAL,
        "height = { value = 2.0, unit = \"m\" }",
        "length = { value = 3, unit = \"m\" }",
    );
    let text = edit(
        &text,
        "shape = \"vertical-cylinder\"",
        "shape = \"horizontal-cylinder\"",
    );
    let p = ok(&text);
    assert_eq!(
        p.shape,
        Shape::HorizontalCylinder {
            diameter: 1.6,
            length: 3.0
        }
    );
    let text = edit(
        MINIMAL,
        "shape = \"vertical-cylinder\"",
        "shape = \"cylinder\"",
    );
    let e = err(&text);
    check(&e, &text, "cylinder", "[vessel] shape", &["\"vertical-cylinder\", \"horizontal-cylinder\", \"rectangular\", \"sphere\", \"strapping\""]);
    let text = edit(
        MINIMAL,
        "shape = \"vertical-cylinder\"",
        "shape = \"rectangular\"",
    );
    let e = err(&text);
    check(
        &e,
        &text,
        "diameter",
        "[vessel] diameter",
        &["not used by shape rectangular"],
    );
}

#[test]
fn strapping_table() {
    let vessel = "shape = \"strapping\"\nstrapping = { level_unit = \"cm\", volume_unit = \"L\", points = [[0, 20], [50, 1100], [200, 4600]] }\n";
    let text = edit(
            MINIMAL,
            "shape = \"vertical-cylinder\"\ndiameter = { value = 1.6, unit = \"m\" }\nheight = { value = 2.0, unit = \"m\" }\n",
            vessel,
        );
    let p = ok(&text);
    match &p.shape {
        Shape::Strapping(points) => {
            assert_eq!(points.len(), 3);
            assert!(close(points[1].0, 0.5) && close(points[1].1, 1.1));
            assert!(close(points[2].0, 2.0) && close(points[2].1, 4.6));
        }
        other => panic!("{other:?}"),
    }
    // A falling volume: the kernel names the point, the reader its line.
    let bad = text.replace("[50, 1100], [200, 4600]", "[50, 1100],\n  [200, 900]");
    let e = err(&bad);
    check(
        &e,
        &bad,
        "[200, 900]",
        "[vessel] strapping.points[2]",
        &["rise strictly"],
    );
    let bad = text.replace("[0, 20]", "[0, 20, 3]");
    let e = err(&bad);
    check(
        &e,
        &bad,
        "points",
        "[vessel] strapping.points[0]",
        &["[level, volume] pair"],
    );
    let many: Vec<String> = (0..40).map(|i| format!("[{i}, {i}]")).collect();
    let bad = text.replace(
        "[[0, 20], [50, 1100], [200, 4600]]",
        &format!("[{}]", many.join(", ")),
    );
    let e = err(&bad);
    check(
        &e,
        &bad,
        "points",
        "[vessel] strapping.points",
        &["at most 32"],
    );
}
