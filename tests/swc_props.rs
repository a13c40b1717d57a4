//! Property tests of the SWC reader and writer: read → write → read keeps every point, and no
//! input (random text, random bytes, lines with random columns) makes the reader panic; every
//! rejection of a line names that line.

use pollard::Morphology;
use pollard::swc::{self, Fault, SwcError, SwcPoint};
use pollard::synth;
use proptest::prelude::*;

/// The fields a round trip must keep: id, type, position and radius bits, parent.
type Key = (i64, i32, [u64; 3], Option<u64>, i64);

/// The fields a round trip must keep (the line number may change with the header).
fn key(p: &SwcPoint) -> Key {
    (
        p.id,
        p.kind,
        // compare bit patterns, except that −0 and +0 are the same number
        p.pos.map(|x| (x + 0.0).to_bits()),
        p.radius.map(|r| (r + 0.0).to_bits()),
        p.parent,
    )
}

fn keys(points: &[SwcPoint]) -> Vec<Key> {
    points.iter().map(key).collect()
}

/// Checks the rule for errors: a fault that belongs to one line names a line that exists, and
/// that line holds what the fault says.
fn check_error(e: &SwcError, text_lines: &[&str]) {
    let line_level = !matches!(
        e.fault,
        Fault::Empty
            | Fault::Io(_)
            | Fault::OutOfRange {
                name: "point count",
                ..
            }
    );
    if !line_level {
        assert_eq!(e.line, None, "{e}");
        return;
    }
    let l = e
        .line
        .unwrap_or_else(|| panic!("line-level fault without a line: {e}"));
    assert!(
        l >= 1 && l <= text_lines.len().max(1),
        "line {l} of {}: {e}",
        text_lines.len()
    );
    let Some(line) = text_lines.get(l - 1) else {
        return;
    };
    let content = line.split('#').next().unwrap_or("");
    let cols: Vec<&str> = content.split_ascii_whitespace().collect();
    match &e.fault {
        Fault::TooFewColumns(k) => assert_eq!(cols.len(), *k, "{e}"),
        Fault::NotANumber { column, text, .. }
        | Fault::NotFinite { column, text, .. }
        | Fault::NotAnInteger { column, text, .. } => {
            // the message quotes the field, cut to 40 characters and an ellipsis when longer
            let quoted = text.trim_end_matches('…');
            let col = cols.get(column - 1).copied().unwrap_or("");
            assert!(col.starts_with(quoted), "{e}");
            assert!(text.ends_with('…') || col == quoted, "{e}");
        }
        Fault::OutOfRange { text, .. } => {
            let quoted = text.trim_end_matches('…');
            assert!(cols.iter().any(|c| c.starts_with(quoted)), "{e}")
        }
        Fault::DuplicateId { first_line, .. } => assert!(*first_line < l, "{e}"),
        Fault::MissingParent { .. }
        | Fault::OwnParent(_)
        | Fault::Cycle(_)
        | Fault::NegativeRadius(_) => assert!(cols.len() >= 7, "{e}"),
        Fault::NotUtf8(_) | Fault::Empty | Fault::Io(_) => {}
    }
}

/// Reads `text` both ways (line checks only, and the whole tree) and checks any error.
fn read_without_panic(text: &str) {
    let lines: Vec<&str> = text.split('\n').collect();
    if let Err(e) = swc::parse_str(text, "p.swc") {
        check_error(&e, &lines);
    }
    if let Err(e) = Morphology::parse(text, "p.swc") {
        check_error(&e, &lines);
    }
}

/// A list of points with distinct ids (in a random order with gaps), every parent either −1 or
/// an id listed before it, any type code, any finite position and a radius that is ≥ 0 or NA.
fn point_lists() -> impl Strategy<Value = Vec<SwcPoint>> {
    let finite = prop_oneof![
        prop::num::f64::POSITIVE
            | prop::num::f64::NEGATIVE
            | prop::num::f64::NORMAL
            | prop::num::f64::SUBNORMAL
            | prop::num::f64::ZERO,
        -1000.0f64..1000.0,
        (-100_000i64..100_000).prop_map(|v| v as f64 / 8.0),
    ];
    let radius = prop_oneof![
        1 => Just(None),
        6 => (0.0f64..50.0).prop_map(Some),
        2 => (prop::num::f64::POSITIVE
            | prop::num::f64::NORMAL
            | prop::num::f64::SUBNORMAL
            | prop::num::f64::ZERO)
            .prop_map(Some),
    ];
    let point = (
        any::<i32>(),
        [finite.clone(), finite.clone(), finite],
        radius,
        any::<prop::sample::Index>(),
        any::<bool>(),
    );
    (
        prop::collection::vec(point, 1..60),
        prop::collection::btree_set(0i64..i64::MAX, 60..61),
    )
        .prop_flat_map(|(pts, ids)| {
            let ids: Vec<i64> = ids.into_iter().take(pts.len()).collect();
            (Just(pts), Just(ids.clone()).prop_shuffle())
        })
        .prop_map(|(pts, ids)| {
            pts.into_iter()
                .enumerate()
                .map(|(i, (kind, pos, radius, pick, root))| SwcPoint {
                    id: ids[i],
                    kind,
                    pos,
                    radius,
                    parent: if i == 0 || root {
                        -1
                    } else {
                        ids[pick.index(i)]
                    },
                    line: 0,
                })
                .collect()
        })
}

/// One token of a garbage line.
fn token() -> impl Strategy<Value = String> {
    prop_oneof![
        (-3i64..30).prop_map(|v| v.to_string()),
        any::<i64>().prop_map(|v| v.to_string()),
        any::<f64>().prop_map(|v| v.to_string()),
        (-1e3f64..1e3).prop_map(|v| format!("{v:e}")),
        prop::sample::select(vec![
            "NA",
            "nan",
            "NaN",
            "inf",
            "-inf",
            "1e999",
            "-1e999",
            "1.5",
            "3.0",
            "-0",
            "+7",
            "0x10",
            "1_000",
            "",
            "#",
            "# c",
            "1,5",
            "--1",
            ".",
            "e5",
            "9223372036854775807",
            "9223372036854775808",
            "-9223372036854775809",
            "2147483648",
            "1e19",
            "-1.0",
        ])
        .prop_map(str::to_string),
        "[a-zA-Z]{1,4}",
        "\\PC{1,3}",
    ]
}

/// A garbage line: 0 to 10 tokens joined by spaces or tabs, sometimes with a comment.
fn garbage_line() -> impl Strategy<Value = String> {
    (
        prop::collection::vec(
            (token(), prop::sample::select(vec![" ", "\t", "  "])),
            0..11,
        ),
        prop::option::weighted(0.15, "[ -~]{0,12}"),
    )
        .prop_map(|(toks, comment)| {
            let mut s = String::new();
            for (t, sep) in toks {
                s.push_str(&t);
                s.push_str(sep);
            }
            if let Some(c) = comment {
                s.push('#');
                s.push_str(&c);
            }
            s
        })
}

/// A mostly valid 7-column line with ids and parents from a small range, so that duplicate ids,
/// missing parents, own parents and cycles all turn up.
fn near_valid_line() -> impl Strategy<Value = String> {
    (
        0i64..12,
        prop::sample::select(vec![1, 2, 3, 4, 5, 6, 7, -3]),
        [-50.0f64..50.0, -50.0f64..50.0, -50.0f64..50.0],
        prop_oneof![
            8 => (0.0f64..5.0).prop_map(|r| r.to_string()),
            1 => Just("NA".to_string()),
            1 => (-5.0f64..0.0).prop_map(|r| r.to_string()),
        ],
        -2i64..12,
    )
        .prop_map(|(id, kind, pos, r, parent)| {
            format!("{id} {kind} {} {} {} {r} {parent}", pos[0], pos[1], pos[2])
        })
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(128))]

    #[test]
    fn random_trees_survive_read_write_read(n in 1usize..1500, seed in any::<u64>()) {
        let pts = synth::random_tree(n, seed);
        let text = synth::to_swc(&pts, &["round trip"]);
        let first = swc::parse_str(&text, "a.swc").expect("generated file reads");
        prop_assert_eq!(keys(&first.points), keys(&pts));
        let again = swc::write_string(&first.points, &first.header);
        prop_assert_eq!(&again, &text);
        let second = swc::parse_str(&again, "b.swc").expect("rewritten file reads");
        prop_assert_eq!(keys(&second.points), keys(&first.points));
        let m = Morphology::parse(&again, "b.swc").expect("generated tree is valid");
        prop_assert_eq!(m.len(), n);
    }

    #[test]
    fn generated_point_lists_survive_read_write_read(
        pts in point_lists(),
        header in prop::collection::vec("[a-zA-Z0-9 #.,:()-]{0,30}[a-z]", 0..4),
    ) {
        let text = swc::write_string(&pts, &header);
        let first = swc::parse_str(&text, "a.swc").expect("written points read back");
        prop_assert_eq!(keys(&first.points), keys(&pts));
        prop_assert_eq!(&first.header, &header);
        for (i, p) in first.points.iter().enumerate() {
            prop_assert_eq!(p.line, header.len() + i + 1);
        }
        let second = swc::parse_str(&swc::write_string(&first.points, &first.header), "b.swc")
            .expect("rewritten points read back");
        prop_assert_eq!(keys(&second.points), keys(&pts));
        // parents always come first here, so the tree is valid too
        let m = Morphology::parse(&text, "a.swc").expect("a forest of valid links");
        prop_assert_eq!(m.len(), pts.len());
    }

    #[test]
    fn arbitrary_text_never_panics(text in "\\PC*") {
        read_without_panic(&text);
    }

    #[test]
    fn arbitrary_bytes_never_panic(bytes in prop::collection::vec(any::<u8>(), 0..400)) {
        let lines: Vec<&[u8]> = bytes.split(|&b| b == b'\n').collect();
        if let Err(e) = swc::parse_bytes(&bytes, "p.swc") {
            if let Fault::NotUtf8(at) = e.fault {
                // the line named is the one holding the bad byte
                let line = bytes[..at].iter().filter(|&&b| b == b'\n').count() + 1;
                prop_assert_eq!(e.line, Some(line));
                prop_assert!(line <= lines.len());
            } else {
                let text = std::str::from_utf8(&bytes).expect("only bad UTF-8 fails as such");
                check_error(&e, &text.split('\n').collect::<Vec<_>>());
            }
        }
    }

    #[test]
    fn lines_with_random_columns_never_panic(
        lines in prop::collection::vec(garbage_line(), 0..12),
        crlf in any::<bool>(),
    ) {
        let text = lines.join(if crlf { "\r\n" } else { "\n" });
        read_without_panic(&text);
    }

    #[test]
    fn near_valid_files_fail_on_the_right_line(
        lines in prop::collection::vec(
            prop_oneof![6 => near_valid_line(), 1 => garbage_line()],
            1..14,
        ),
    ) {
        let text = lines.join("\n");
        read_without_panic(&text);
    }
}
