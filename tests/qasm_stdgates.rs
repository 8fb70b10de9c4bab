//! OpenQASM 3 as compilers write it: phase gates of stdgates.inc, `gphase`, `#pragma` and
//! annotation lines; OpenQASM 2 programs with `qreg`/`creg` and qelib1.inc.

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

/// OpenQASM 2 programs as lab archives hold them: `qreg`/`creg`, qelib1.inc, `measure q[i]
/// -> c[i]`. qelib1.inc's `cu1(λ)` is stdgates.inc's `cp(λ)`, `cu3(θ, φ, λ)` is `cu(θ, φ, λ,
/// 0)` and `u` is `u3` (OpenQASM 2 specification, Cross et al. 2017, qelib1.inc; OpenQASM 3
/// specification, stdgates.inc). Each program reads as the OpenQASM 3 program written with
/// the standard's own conversion.
#[test]
fn openqasm2_programs_read_as_their_openqasm3_conversion() {
    let l = layout();
    let map = slackmap::circuit::qasm::QubitMap::parse("q[0]=q0, q[1]=q1").unwrap();
    let v2 = "OPENQASM 2.0;\ninclude \"qelib1.inc\";\nqreg q[2];\ncreg c[2];\n\
              u3(pi/2, -pi/2, pi/2) q[0];\nu(pi, 0, pi) q[1];\nbarrier q;\ncu1(pi) q[0], q[1];\n\
              barrier q;\ncu3(0, 0, pi) q[1], q[0];\nbarrier q[0], q[1];\nu1(pi/4) q[0];\n\
              u2(-pi/2, pi/2) q[1];\nmeasure q[0] -> c[0];\nmeasure q[1] -> c[1];\n";
    let v3 = "OPENQASM 3.0;\ninclude \"stdgates.inc\";\nqubit[2] q;\nbit[2] c;\n\
              u3(pi/2, -pi/2, pi/2) q[0];\nu3(pi, 0, pi) q[1];\nbarrier q;\ncp(pi) q[0], q[1];\n\
              barrier q;\ncu(0, 0, pi, 0) q[1], q[0];\nbarrier q[0], q[1];\nu1(pi/4) q[0];\n\
              u2(-pi/2, pi/2) q[1];\nc[0] = measure q[0];\nc[1] = measure q[1];\n";
    let a = import(v2, Path::new("old.qasm"), "p", &l, Some(&map)).unwrap();
    let b = import(v3, Path::new("new.qasm"), "p", &l, Some(&map)).unwrap();
    assert_eq!(a, b);
    // u3(pi/2, -pi/2, pi/2) = rx(pi/2) = sx and u(pi, 0, pi) = x up to phase; cu1(pi) = cz;
    // cu3(0, 0, pi) = cp(pi) = cz (symmetric); u2(-pi/2, pi/2) = u3(pi/2, -pi/2, pi/2) = sx.
    let gates: Vec<Vec<Gate>> =
        a.layers.iter().map(|l| l.iter().map(|o| o.gate).collect()).collect();
    assert_eq!(gates[0], [Gate::Sx, Gate::X]);
    assert_eq!(gates[1], [Gate::Cz]);
    assert_eq!(gates[2], [Gate::Cz]);

    // Through the binary, with the whole-register measurement of OpenQASM 2.
    let dir = tempfile::tempdir().unwrap();
    let f = dir.path().join("old.qasm");
    let ok = "OPENQASM 2.0;\ninclude \"qelib1.inc\";\nqreg q[2];\ncreg c[2];\nu3(pi,0,pi) q[0];\n\
              barrier q;\ncz q[0],q[1];\nmeasure q -> c;\n";
    std::fs::write(&f, ok).unwrap();
    let run = |extra: &[&str]| {
        common::slackmap()
            .args(["check", "--layout", common::good("layout.toml").to_str().unwrap()])
            .args(["--circuits", f.to_str().unwrap()])
            .args(extra)
            .output()
            .unwrap()
    };
    let out = run(&["--qubit-map", "q[0]=q1,q[1]=q4"]);
    assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
    // Registers need a placement, as in OpenQASM 3.
    let out = run(&[]);
    assert_eq!(out.status.code(), Some(2));
    let m = String::from_utf8_lossy(&out.stderr);
    assert!(m.contains("old.qasm line 5") && m.contains("no qubit map was given"), "{m}");
    // What OpenQASM 2 has beyond the subset stays an error with file and line.
    for (body, line, what) in [
        ("if(c==1) x q[0];\n", "line 5", "classical control flow"),
        ("opaque magic a;\n", "line 5", "opaque definitions"),
        ("x q[0];\nmeasure q[0] -> c[0];\nx q[1];\n", "line 7", "after a measurement"),
        ("reset q[0];\nx q[0];\nreset q[0];\n", "line 7", "reset of q1 after a gate"),
    ] {
        let text =
            format!("OPENQASM 2.0;\ninclude \"qelib1.inc\";\nqreg q[2];\ncreg c[2];\n{body}");
        std::fs::write(&f, text).unwrap();
        let out = run(&["--qubit-map", "q[0]=q1,q[1]=q4"]);
        assert_eq!(out.status.code(), Some(2), "{body}");
        let m = String::from_utf8_lossy(&out.stderr);
        assert!(m.contains(&format!("old.qasm {line}")) && m.contains(what), "{body}: {m}");
    }
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
