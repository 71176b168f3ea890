//! `[[reaction]]`: rate-constant units and the checks of a reaction.

use super::*;

#[test]
fn rate_constant_order_must_match() {
    // Orders 1 + 1 = 2, but 1/s is first order.
    let text = edit(
        EXAMPLE,
        "value = 0.11, unit = \"L/(mol*s)\"",
        "value = 0.11, unit = \"1/s\"",
    );
    let e = err(&text);
    check(
        &e,
        &text,
        "unit = \"1/s\"",
        "[[reaction]] rate_constant.unit",
        &[
            "\"1/s\" is for total order 1",
            "orders sum to 2",
            "L/(mol*s)",
            "SI",
        ],
    );
    // The reverse law has its own orders (NaOAc = 1): a second-order unit fails.
    let text = edit(
        EXAMPLE,
        "value = 0.6, unit = \"1/h\"",
        "value = 0.6, unit = \"L/(mol*h)\"",
    );
    let e = err(&text);
    check(
        &e,
        &text,
        "reverse",
        "[[reaction]] reverse.rate_constant.unit",
        &["orders sum to 1"],
    );
    // Fractional orders: only SI.
    let text = edit(
        EXAMPLE,
        "orders = { NaOH = 1, EtOAc = 1 }",
        "orders = { NaOH = 1, EtOAc = 0.5 }",
    );
    let e = err(&text);
    check(
        &e,
        &text,
        "0.11",
        "[[reaction]] rate_constant.unit",
        &["valid for total order 1.5: SI"],
    );
    let text = text.replace(
        "value = 0.11, unit = \"L/(mol*s)\"",
        "value = 0.003, unit = \"SI\"",
    );
    assert!(close(ok(&text).reactions[0].forward.rate_constant, 0.003));
}

#[test]
fn reaction_checks() {
    let text = edit(
        EXAMPLE,
        "orders = { NaOH = 1, EtOAc = 1 }",
        "orders = { NaOH = 1, EtOAc = 5 }",
    );
    let e = err(&text);
    check(
        &e,
        &text,
        "EtOAc = 5",
        "[[reaction]] orders.EtOAc",
        &["between 0 and 4, got 5"],
    );
    let text = edit(EXAMPLE, "NaOH = -1, EtOAc = -1,", "NaOH = 1, EtOAc = 1,");
    let e = err(&text);
    check(
        &e,
        &text,
        "stoichiometry",
        "[[reaction]] stoichiometry",
        &["negative coefficient"],
    );
    let text = edit(
        EXAMPLE,
        "reference_temperature = { value = 25, unit = \"degC\" }\n",
        "",
    );
    let e = err(&text);
    check(
        &e,
        &text,
        "activation_energy",
        "[[reaction]] reference_temperature",
        &["activation energy"],
    );
    let text = edit(
        EXAMPLE,
        "activation_energy = { value = 41, unit = \"kJ/mol\" }\n",
        "",
    );
    let text = edit(
        &text,
        "reference_temperature = { value = 25, unit = \"degC\" }\n",
        "",
    );
    assert_eq!(ok(&text).reactions[0].reference_temperature, 298.15);
    let text = edit(EXAMPLE, "value = 0.11,", "value = -0.11,");
    let e = err(&text);
    check(
        &e,
        &text,
        "-0.11",
        "[[reaction]] rate_constant",
        &["must not be negative"],
    );
    let text = edit(
        EXAMPLE,
        "value = 0.11, unit = \"L/(mol*s)\"",
        "value = 0.11",
    );
    let e = err(&text);
    check(
        &e,
        &text,
        "value = 0.11",
        "[[reaction]] rate_constant.unit",
        &["missing", "valid for total order 2: m3/(mol*s), L/(mol*s)"],
    );
    // Reverse law without a product.
    let text = edit(EXAMPLE, "NaOAc = 1, EtOH = 1 }", "NaOAc = 0, EtOH = 0 }");
    let e = err(&text);
    check(
        &e,
        &text,
        "reverse =",
        "[[reaction]] reverse",
        &["needs a product"],
    );
    let text = edit(
        EXAMPLE,
        "name = \"saponification\"",
        "name = \"saponification\"\nrate = 1",
    );
    let e = err(&text);
    check(
        &e,
        &text,
        "rate = 1",
        "[[reaction]] rate",
        &["valid keys: name, stoichiometry"],
    );
}
