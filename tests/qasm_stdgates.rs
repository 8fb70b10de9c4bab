//! OpenQASM 3 as compilers write it: phase gates of stdgates.inc, `gphase`, `#pragma` and
//! annotation lines; OpenQASM 2 is refused with how to convert.

mod common;

use std::f64::consts::PI;
use std::path::Path;

use slackmap::circuit::qasm::import;
use slackmap::gate::Gate;
use slackmap::layout::read_layout;

fn layout() -> slackmap::layout::Layout {
    read_layout(&common::good("layout.toml")).unwrap()
}

const HEAD: &str = "OPENQASM 3.0;\ninclude \"stdgates.inc\";\nbit[1] c;\n";

/// OpenQASM 3 specification, stdgates.inc: p(λ) = phase(λ) = u1(λ) = diag(1, e^{iλ}),
/// t = p(π/4), tdg = p(-π/4); each equals rz(λ) up to a global phase, which no outcome sees.
#[test]
fn phase_gates_read_as_rz_with_their_angle() {
    let l = layout();
    for (line, angle) in [
        ("t $0;", PI / 4.0),
        ("tdg $0;", -PI / 4.0),
        ("p(pi/2) $0;", PI / 2.0),
        ("phase(0.3) $0;", 0.3),
        ("u1(-pi) $0;", -PI),
    ] {
        let text =
            format!("{HEAD}sx $0;\nbarrier;\n{line}\nbarrier;\nsx $0;\nc[0] = measure $0;\n");
        let c = import(&text, Path::new("p.qasm"), "p", &l, None)
            .unwrap_or_else(|e| panic!("{line}: {e}"));
        let op = c.layers[1][0];
        assert_eq!(op.gate, Gate::Rz, "{line}");
        assert!((op.angle - angle).abs() < 1e-12, "{line}: {}", op.angle);
    }
    let m = import(
        &format!("{HEAD}t(0.1) $0;\nc[0] = measure $0;\n"),
        Path::new("p.qasm"),
        "p",
        &l,
        None,
    )
    .unwrap_err()
    .to_string();
    assert!(m.contains("gate t takes no angle"), "{m}");
}

#[test]
fn gphase_pragmas_and_annotations_change_nothing() {
    let l = layout();
    let plain = format!("{HEAD}sx $0;\nbarrier;\nrz(pi/2) $0;\nc[0] = measure $0;\n");
    let busy = String::from(
        "#pragma compiler-version 7\nOPENQASM 3.0;\ninclude \"stdgates.inc\";\nbit[1] c;\n\
         gphase(pi/8);\n@slot fast\nsx $0;\nbarrier;\ngphase(-0.2);\nrz(pi/2) $0;\n\
         #pragma end-of-block\nc[0] = measure $0;\n",
    );
    let a = import(&plain, Path::new("a.qasm"), "a", &l, None).unwrap();
    let b = import(&busy, Path::new("b.qasm"), "a", &l, None).unwrap();
    assert_eq!(a, b);
}

#[test]
fn openqasm2_is_refused_with_the_conversion() {
    let dir = tempfile::tempdir().unwrap();
    let f = dir.path().join("old.qasm");
    std::fs::write(
        &f,
        "OPENQASM 2.0;\ninclude \"qelib1.inc\";\nqreg q[1];\ncreg c[1];\nx q[0];\nmeasure q[0] -> c[0];\n",
    )
    .unwrap();
    let out = common::slackmap()
        .args(["check", "--layout", common::good("layout.toml").to_str().unwrap()])
        .args(["--circuits", f.to_str().unwrap()])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    let m = String::from_utf8_lossy(&out.stderr);
    assert!(m.contains("old.qasm line 1") && m.contains("'qubit[n] q;' for 'qreg q[n];'"), "{m}");
}

#[test]
fn skipped_pragmas_and_annotations_are_listed_once() {
    let dir = tempfile::tempdir().unwrap();
    let c = dir.path().join("c");
    std::fs::create_dir(&c).unwrap();
    let body = "OPENQASM 3.0;\ninclude \"stdgates.inc\";\nbit[1] c;\nsx $0;\nc[0] = measure $0;\n";
    let head = "OPENQASM 3.0;\ninclude \"stdgates.inc\";\nbit[1] c;\n";
    let a = format!("#pragma compiler-version 7\n{head}@slot fast\nsx $0;\nc[0] = measure $0;\n");
    std::fs::write(c.join("a.qasm"), a).unwrap();
    std::fs::write(c.join("b.qasm"), format!("#pragma compiler-version 7\n{body}#pragma end\n"))
        .unwrap();
    let out = common::slackmap()
        .args(["check", "--layout", common::good("layout.toml").to_str().unwrap()])
        .args(["--circuits", c.to_str().unwrap()])
        .output()
        .unwrap();
    let text =
        format!("{}{}", String::from_utf8_lossy(&out.stdout), String::from_utf8_lossy(&out.stderr));
    // One warning, each distinct line once, with the files that hold it.
    assert_eq!(text.matches("#pragma or annotation line").count(), 1, "{text}");
    assert!(text.contains("hold 3 distinct"), "{text}");
    assert!(text.contains("'#pragma compiler-version 7' (2 files; first"), "{text}");
    assert!(text.contains("a.qasm line 1"), "{text}");
    assert!(
        text.contains("'@slot fast' (1 file; first") && text.contains("a.qasm line 5"),
        "{text}"
    );
    assert!(text.contains("'#pragma end' (1 file;") && text.contains("b.qasm line 7"), "{text}");
}
