//! The language server in process, over real JSON-RPC framing: every feature as an editor would
//! use it. Answers are snapshots (expect-test; `UPDATE_EXPECT=1` rewrites them for review).

mod support;

use expect_test::{expect, Expect};
use serde_json::{json, Value};
use support::{at, file_uri, temp_dir, TestClient, HOP};

const URI: &str = "file:///virtual/hop.costate";

async fn opened(text: &str) -> TestClient {
    let mut client = TestClient::start();
    client.initialize(json!({ "solveOnSave": false })).await;
    client.open(URI, text).await;
    client.diagnostics(URI, 1).await;
    client
}

fn check(actual: impl std::fmt::Display, expected: Expect) {
    expected.assert_eq(&actual.to_string());
}

/// One line per diagnostic: `line:col-line:col CODE first line of the message`.
fn show_diagnostics(diagnostics: &[Value]) -> String {
    diagnostics
        .iter()
        .map(|d| {
            let r = &d["range"];
            format!(
                "{}:{}-{}:{} {} {}\n",
                r["start"]["line"],
                r["start"]["character"],
                r["end"]["line"],
                r["end"]["character"],
                d["code"].as_str().unwrap_or(""),
                d["message"].as_str().unwrap_or("").lines().next().unwrap_or("")
            )
        })
        .collect()
}

fn replace(line: u32, from: u32, to: u32, text: &str) -> Value {
    json!([{ "range": { "start": at(line, from), "end": at(line, to) }, "text": text }])
}

#[tokio::test]
async fn diagnostics_follow_edits_that_break_and_repair_the_file() {
    let mut client = TestClient::start();
    client.initialize(json!(null)).await;
    client.open(URI, HOP).await;
    check(show_diagnostics(&client.diagnostics(URI, 1).await), expect![[""]]);
    // `x' = v` becomes `x' = vv` (an unknown name), then the closing brace of `state` goes.
    client.change(URI, 2, replace(21, 7, 8, "vv")).await;
    check(
        show_diagnostics(&client.diagnostics(URI, 2).await),
        expect![[r#"
        21:7-21:9 E0201 unknown name `vv`
    "#]],
    );
    client.change(URI, 3, replace(14, 0, 1, "")).await;
    check(
        show_diagnostics(&client.diagnostics(URI, 3).await),
        expect![[r#"
        10:6-10:7 E0105 unclosed `state` block
        21:7-21:9 E0201 unknown name `vv`
    "#]],
    );
    // Repair both, in two edits sent back to back: they apply in order.
    client.change(URI, 4, replace(14, 0, 0, "}")).await;
    client.change(URI, 5, replace(21, 7, 9, "v")).await;
    check(show_diagnostics(&client.diagnostics(URI, 5).await), expect![""]);
}

#[tokio::test]
async fn hover_shows_kind_unit_bounds_doc_and_folded_values() {
    let mut client = opened(HOP).await;
    let mut hover = async |line, character| {
        let h = client
            .request(
                "textDocument/hover",
                json!({ "textDocument": { "uri": URI }, "position": at(line, character) }),
            )
            .await;
        h["contents"]["value"].as_str().unwrap_or("(none)").to_string()
    };
    check(
        hover(21, 2).await,
        expect![[r#"
        **state** `x` [m]

        start 0 m · end 1 m

        position"#]],
    );
    check(
        hover(12, 24).await,
        expect![[r#"
            **constant** `distance`

            value: `1 m`

            the distance to cover"#]],
    );
    check(
        hover(17, 3).await,
        expect![[r#"
        **control** `u` [m/s^2]

        in -10 m/s^2 .. 10 m/s^2"#]],
    );
    check(
        hover(26, 14).await,
        expect![[r#"
        **built-in** `integral(expr)`

        integral of the argument over the horizon"#]],
    );
    check(
        hover(30, 4).await,
        expect![[r#"
        **solve setting** `intervals`

        shooting intervals over the horizon (default `50`)"#]],
    );
    check(hover(2, 0).await, expect!["(none)"]);
}

fn labels(items: &Value) -> String {
    let mut out: Vec<String> = items
        .as_array()
        .unwrap()
        .iter()
        .map(|i| {
            format!("{} ({})", i["label"].as_str().unwrap(), i["detail"].as_str().unwrap_or(""))
        })
        .collect();
    out.sort();
    out.join("\n")
}

#[tokio::test]
async fn completion_depends_on_where_the_cursor_is() {
    let text = HOP
        .replace("  intervals = 10\n", "  intervals = 10\n  \n  integrator = \n")
        .replace("time t [s]: start 0, end 1\n", "time t [s]: start 0, end 1\n\n")
        .replace("  u [m/s^2]: in -10 .. 10\n", "  u [m/s^2]: in -10 .. 10\n  w [k]\n");
    let mut client = opened(&text).await;
    let mut complete = async |line, character| {
        let items = client
            .request(
                "textDocument/completion",
                json!({ "textDocument": { "uri": URI }, "position": at(line, character) }),
            )
            .await;
        labels(&items)
    };
    // At the top level, on an empty line: the item keywords.
    check(
        complete(9, 0).await,
        expect![[r#"
        boundary (keyword)
        const (keyword)
        control (keyword)
        cost (keyword)
        dynamics (keyword)
        expect (keyword)
        fn (keyword)
        param (keyword)
        path (keyword)
        problem (keyword)
        solve (keyword)
        state (keyword)
        time (keyword)"#]],
    );
    // Inside `[..]`: units (only the first few shown here).
    let units = complete(19, 6).await;
    assert!(units.contains("km (length)") || units.contains("m (length)"), "{units}");
    assert!(units.contains("s (time)"), "{units}");
    // An empty entry of `solve`: its keys; after `integrator =`: its values.
    check(
        complete(33, 2).await,
        expect![[r#"
        control_shape (default constant)
        hessian (default exact)
        integrator (default rk4)
        intervals (default 50)
        iteration_limit (default 200)
        substeps (default 1)
        time_limit (default none)
        tolerance (default 1e-6)"#]],
    );
    check(
        complete(34, 15).await,
        expect![[r#"
        radau (value of `integrator`)
        rk4 (value of `integrator`)"#]],
    );
    // In an expression: names in scope with kind and unit, built-ins with signatures.
    check(
        complete(28, 20).await,
        expect![[r#"
        abs (abs(x))
        acos (acos(x))
        asin (asin(x))
        atan (atan(x))
        atan2 (atan2(y, x))
        cos (cos(x))
        cosh (cosh(x))
        distance (constant)
        end (end(state))
        exp (exp(x))
        integral (integral(expr))
        log (log(x))
        max (max(a, b, ...))
        min (min(a, b, ...))
        pi (pi)
        sin (sin(x))
        sinh (sinh(x))
        sqrt (sqrt(x))
        start (start(state))
        t (independent variable [s])
        tan (tan(x))
        tanh (tanh(x))
        u (control [m/s^2])
        v (state [m/s])
        w (control)
        x (state [m])"#]],
    );
}

#[tokio::test]
async fn definition_references_and_rename() {
    let mut client = opened(HOP).await;
    let position = json!({ "textDocument": { "uri": URI }, "position": at(12, 24) });
    let definition = client.request("textDocument/definition", position.clone()).await;
    check(
        definition["range"].to_string(),
        expect![[r#"{"end":{"character":10,"line":5},"start":{"character":2,"line":5}}"#]],
    );
    let mut refs = position.clone();
    refs["context"] = json!({ "includeDeclaration": true });
    let references = client.request("textDocument/references", refs).await;
    let ranges: Vec<String> =
        references.as_array().unwrap().iter().map(|l| l["range"].to_string()).collect();
    check(
        ranges.join("\n"),
        expect![[r#"
        {"end":{"character":10,"line":5},"start":{"character":2,"line":5}}
        {"end":{"character":30,"line":12},"start":{"character":22,"line":12}}"#]],
    );
    let prepared = client.request("textDocument/prepareRename", position.clone()).await;
    check(
        prepared.to_string(),
        expect![[r#"{"end":{"character":30,"line":12},"start":{"character":22,"line":12}}"#]],
    );
    let mut rename = position.clone();
    rename["newName"] = json!("span");
    let edit = client.request("textDocument/rename", rename.clone()).await;
    let edits = &edit["changes"][URI];
    check(
        edits.to_string(),
        expect![[
            r#"[{"newText":"span","range":{"end":{"character":10,"line":5},"start":{"character":2,"line":5}}},{"newText":"span","range":{"end":{"character":30,"line":12},"start":{"character":22,"line":12}}}]"#
        ]],
    );
    for bad in ["2far", "sin", "state", "v", "ü"] {
        rename["newName"] = json!(bad);
        let refused = client.request("textDocument/rename", rename.clone()).await;
        assert!(
            refused["error"]["message"].is_string(),
            "renaming to `{bad}` must be refused: {refused}"
        );
    }
    rename["newName"] = json!("2far");
    check(
        client.request("textDocument/rename", rename).await["error"]["message"].clone(),
        expect![[
            r#""`2far` is not a valid name: use ASCII letters, digits and `_`, not starting with a digit, and no keyword""#
        ]],
    );
    // Built-ins cannot be renamed.
    let builtin =
        json!({ "textDocument": { "uri": URI }, "position": at(26, 12), "newName": "area" });
    check(
        client.request("textDocument/rename", builtin).await["error"]["message"].clone(),
        expect![[r#""`integral` is built in and cannot be renamed""#]],
    );
}

#[tokio::test]
async fn outline_folding_and_semantic_tokens() {
    let mut client = opened(HOP).await;
    let doc = json!({ "textDocument": { "uri": URI } });
    let symbols = client.request("textDocument/documentSymbol", doc.clone()).await;
    let outline: Vec<String> = symbols
        .as_array()
        .unwrap()
        .iter()
        .map(|s| {
            let children: Vec<&str> = s["children"]
                .as_array()
                .unwrap()
                .iter()
                .map(|c| c["name"].as_str().unwrap())
                .collect();
            format!("{} [{}]", s["name"].as_str().unwrap(), children.join(", "))
        })
        .collect();
    check(
        outline.join("\n"),
        expect![[r#"
        hop []
        const [distance]
        t []
        state [x, v]
        control [u]
        dynamics [x', v']
        cost []
        solve [intervals]"#]],
    );
    let folds = client.request("textDocument/foldingRange", doc.clone()).await;
    let folds: Vec<String> = folds
        .as_array()
        .unwrap()
        .iter()
        .map(|f| {
            format!("{}-{} {}", f["startLine"], f["endLine"], f["kind"].as_str().unwrap_or(""))
        })
        .collect();
    check(
        folds.join("\n"),
        expect![[r#"
        3-6 region
        10-14 region
        16-18 region
        20-23 region
        25-27 region
        29-31 region"#]],
    );
    let tokens = client.request("textDocument/semanticTokens/full", doc).await;
    // Decode the relative encoding back to (line, column, length, type) for the dynamics lines.
    let data: Vec<u64> =
        tokens["data"].as_array().unwrap().iter().map(|v| v.as_u64().unwrap()).collect();
    let (mut line, mut col) = (0, 0);
    let mut decoded = Vec::new();
    for t in data.chunks(5) {
        if t[0] > 0 {
            col = 0;
        }
        line += t[0];
        col += t[1];
        if (21..=22).contains(&line) {
            let kind = costate_ide::TOKEN_TYPES[t[3] as usize];
            let word =
                &HOP.lines().nth(line as usize).unwrap()[col as usize..(col + t[2]) as usize];
            decoded.push(format!(
                "{line}:{col} {word} {kind}{}",
                if t[4] == 1 { " (declaration)" } else { "" }
            ));
        }
    }
    check(
        decoded.join("\n"),
        expect![[r#"
        21:2 x variable
        21:3 ' operator
        21:5 = operator
        21:7 v variable
        22:2 v variable
        22:3 ' operator
        22:5 = operator
        22:7 u variable"#]],
    );
}

#[tokio::test]
async fn formatting_and_signature_help() {
    let messy = HOP
        .replace("  x' = v\n", "x'=v\n")
        .replace("minimize integral(u^2)", "minimize integral(atan2(u, 1)^2)");
    let mut client = opened(&messy).await;
    let edits = client
        .request("textDocument/formatting", json!({ "textDocument": { "uri": URI }, "options": { "tabSize": 2, "insertSpaces": true } }))
        .await;
    let formatted = edits[0]["newText"].as_str().unwrap();
    assert_eq!(
        formatted,
        costate_syntax::fmt::format_source(&messy).unwrap(),
        "the formatter of `costate fmt`"
    );
    assert!(formatted.contains("  x' = v\n"), "{formatted}");
    let line = messy.lines().position(|l| l.contains("atan2")).unwrap() as u32;
    let column = messy.lines().nth(line as usize).unwrap().find(", 1").unwrap() as u32 + 2;
    let help = client
        .request(
            "textDocument/signatureHelp",
            json!({ "textDocument": { "uri": URI }, "position": at(line, column) }),
        )
        .await;
    check(
        format!(
            "{} active {} — {}",
            help["signatures"][0]["label"],
            help["activeParameter"],
            help["signatures"][0]["documentation"]
        ),
        expect![[
            r#""atan2(y, x)" active 1 — "angle of the point (x, y) as `atan2(y, x)`, in radians""#
        ]],
    );
    // A user function's signature, with its doc comment.
    let with_fn = HOP
        .replace(
            "dynamics {",
            "/// spring force\nfn spring(pos, stiffness) = -stiffness * pos\n\ndynamics {",
        )
        .replace("  v' = u\n", "  v' = u + spring(x, \n");
    client.change(URI, 2, json!([{ "text": with_fn }])).await;
    client.diagnostics(URI, 2).await;
    let line = with_fn.lines().position(|l| l.contains("spring(x,")).unwrap() as u32;
    let help = client
        .request(
            "textDocument/signatureHelp",
            json!({ "textDocument": { "uri": URI }, "position": at(line, 21) }),
        )
        .await;
    check(
        format!(
            "{} active {} — {}",
            help["signatures"][0]["label"],
            help["activeParameter"],
            help["signatures"][0]["documentation"]
        ),
        expect![[r#""spring(pos, stiffness)" active 1 — "spring force""#]],
    );
}

/// The problem file on disk, opened in the server with solve-on-save on.
async fn on_disk(
    name: &str,
    text: &str,
    options: Value,
) -> (TestClient, std::path::PathBuf, String) {
    let dir = temp_dir(name);
    let path = dir.join(format!("{name}.costate"));
    std::fs::write(&path, text).unwrap();
    let uri = file_uri(&path);
    let mut client = TestClient::start();
    client.initialize(options).await;
    client.open(&uri, text).await;
    client.diagnostics(&uri, 1).await;
    (client, dir, uri)
}

#[tokio::test]
async fn solve_on_save_shows_the_result_and_writes_the_files() {
    let (mut client, dir, uri) = on_disk("hop", HOP, json!(null)).await;
    let none = client.request("costate/solution", json!({ "uri": uri })).await;
    assert_eq!(none, Value::Null, "no solution before the first save");
    client.save(&uri).await;
    let created = client.wait_for(|m| m["method"] == "window/workDoneProgress/create").await;
    assert!(created["params"]["token"].is_string());
    let report = client
        .wait_for(|m| m["method"] == "$/progress" && m["params"]["value"]["kind"] == "report")
        .await;
    assert!(
        report["params"]["value"]["message"].as_str().unwrap().starts_with("iteration"),
        "{report}"
    );
    check(client.solve_finished().await, expect!["solved"]);
    client.wait_for(|m| m["method"] == "workspace/codeLens/refresh").await;
    client.wait_for(|m| m["method"] == "workspace/inlayHint/refresh").await;
    let log = client.wait_for(|m| m["method"] == "window/logMessage").await;
    let line = log["params"]["message"].as_str().unwrap();
    assert!(line.starts_with("costate: hop: solved · cost 12.1"), "{line}");
    assert_eq!(log["params"]["type"], 3, "an information, not an error");

    // The custom request returns exactly the file written beside the problem.
    let document = client.request("costate/solution", json!({ "uri": uri })).await;
    let on_disk: Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("hop.solution.json")).unwrap())
            .unwrap();
    assert_eq!(document, on_disk);
    assert_eq!(document["format"], "costate-solution");
    assert_eq!(document["status"], "solved");
    let csv = std::fs::read_to_string(dir.join("hop.csv")).unwrap();
    assert!(csv.starts_with("t [s],x [m],v [m/s],u [m/s^2]\n"), "{csv}");
    assert_eq!(csv.lines().count(), 12, "a header and 11 nodes");
    // Minimum effort for a unit move in unit time: u = 6 - 12 t and cost 12 with continuous
    // controls; with N piecewise-constant intervals the optimum is 12 N^2 / (N^2 - 1) (solve
    // the discrete problem by hand: the control is linear in the interval index). 1e-5
    // relative covers the solver's tolerance of 1e-6 on the scaled conditions.
    let cost = document["cost"].as_f64().unwrap();
    let exact = 12.0 * 100.0 / 99.0;
    assert!((cost - exact).abs() < 1e-5 * exact, "cost {cost}, exact {exact}");

    let doc = json!({ "textDocument": { "uri": uri } });
    let lenses = client.request("textDocument/codeLens", doc.clone()).await;
    let title = lenses[0]["command"]["title"].as_str().unwrap();
    assert!(title.starts_with("solved · cost 12"), "{title}");
    assert_eq!(lenses[0]["range"]["start"], at(1, 8));
    let mut range = doc.clone();
    range["range"] = json!({ "start": at(0, 0), "end": at(40, 0) });
    let hints = client.request("textDocument/inlayHint", range).await;
    let hints: Vec<String> = hints
        .as_array()
        .unwrap()
        .iter()
        .map(|h| {
            format!(
                "{}:{}{}",
                h["position"]["line"],
                h["position"]["character"],
                h["label"].as_str().unwrap()
            )
        })
        .collect();
    check(
        hints.join("\n"),
        expect![[r#"
        8:6 → 1 s
        12:3 → 1 m
        13:3 → 0 m/s
        17:3 → -5.45455 m/s^2"#]],
    );
    let hover = client
        .request(
            "textDocument/hover",
            json!({ "textDocument": { "uri": uri }, "position": at(12, 2) }),
        )
        .await;
    let hover = hover["contents"]["value"].as_str().unwrap();
    assert!(hover.contains("solution: start 0 m · end 1 m · min 0 m · max 1 m"), "{hover}");
}

#[tokio::test]
async fn a_failed_solve_becomes_a_diagnostic_on_its_line_until_the_text_changes() {
    let text = "problem nan\ntime t [s]: start 0, end 1\nstate {\n  x: start -1, end free\n}\ncontrol { u: in -1 .. 1 }\ndynamics {\n  x' = sqrt(x) + u\n}\ncost { minimize integral(u^2) }\n";
    let (mut client, _dir, uri) = on_disk("nan", text, json!(null)).await;
    client.save(&uri).await;
    check(client.solve_finished().await, expect!["function evaluation failed"]);
    let diagnostics = client.diagnostics(&uri, 1).await;
    check(
        show_diagnostics(&diagnostics),
        expect![[r#"
        7:2-7:18 E1001 dynamics of `x` could not be evaluated at node 0 (t = 0 s)
    "#]],
    );
    // An edit makes the finding stale: it disappears.
    client.change(&uri, 2, replace(9, 0, 0, "\n")).await;
    check(show_diagnostics(&client.diagnostics(&uri, 2).await), expect![[""]]);
}

#[tokio::test]
async fn a_newer_save_cancels_the_running_solve() {
    // 4,000 intervals keep the first solve busy for far longer than the second save takes.
    let (mut client, _dir, uri) =
        on_disk("cancel", HOP, json!({ "costate": { "solveIntervals": 4000 } })).await;
    client.save(&uri).await;
    client
        .wait_for(|m| m["method"] == "$/progress" && m["params"]["value"]["kind"] == "begin")
        .await;
    client
        .notify(
            "workspace/didChangeConfiguration",
            json!({ "settings": { "costate": { "solveIntervals": 8 } } }),
        )
        .await;
    client.save(&uri).await;
    let mut endings = [client.solve_finished().await, client.solve_finished().await];
    endings.sort();
    check(
        endings.join("\n"),
        expect![[r#"
        cancelled by a newer save
        solved"#]],
    );
    let document = client.request("costate/solution", json!({ "uri": uri })).await;
    assert_eq!(document["intervals"], 8, "the result is the newer save's");
}

#[tokio::test]
async fn solve_on_save_can_be_switched_off() {
    let (mut client, _dir, uri) = on_disk("off", HOP, json!({ "solveOnSave": false })).await;
    client.save(&uri).await;
    // A request answered after the save proves the save was handled.
    client
        .request(
            "textDocument/hover",
            json!({ "textDocument": { "uri": uri }, "position": at(12, 2) }),
        )
        .await;
    assert_eq!(client.request("costate/solution", json!({ "uri": uri })).await, Value::Null);
    assert!(!client.seen.iter().any(|m| m["method"] == "window/workDoneProgress/create"));
}

#[tokio::test]
async fn hover_after_a_solve_says_which_bounds_and_constraints_are_active() {
    // Unconstrained, u = 6 - 12 t reaches ±6 and v peaks at 1.5: both limits below bind. The
    // interior-point QP leaves tiny multipliers on inactive rows, so the constraint's verdict is
    // a real test of the threshold in the server.
    let text = HOP
        .replace("u [m/s^2]: in -10 .. 10", "u [m/s^2]: in -5 .. 5")
        .replace("solve {", "path {\n  speed: v <= 1.3\n}\n\nsolve {");
    let (mut client, _dir, uri) = on_disk("active", &text, json!(null)).await;
    client.save(&uri).await;
    check(client.solve_finished().await, expect!["locally infeasible"]);
    let line_of = |needle: &str| text.lines().position(|l| l.contains(needle)).unwrap() as u32;
    let mut hover = async |line, character| {
        let h = client
            .request(
                "textDocument/hover",
                json!({ "textDocument": { "uri": uri }, "position": at(line, character) }),
            )
            .await;
        h["contents"]["value"].as_str().unwrap_or("(none)").to_string()
    };
    let control = hover(line_of("u [m/s^2]"), 2).await;
    assert!(control.contains("lower and upper bound active"), "{control}");
    let speed = hover(line_of("speed:"), 3).await;
    check(
        speed,
        expect![[r#"
        **path constraint** `speed`

        last iterate (not solved): active (nonzero multiplier)"#]],
    );
}

#[tokio::test]
async fn a_failed_solve_never_replaces_the_last_good_solution_files() {
    let (mut client, dir, uri) = on_disk("keep", HOP, json!(null)).await;
    client.save(&uri).await;
    check(client.solve_finished().await, expect!["solved"]);
    let (json_path, csv_path) = (dir.join("hop.solution.json"), dir.join("hop.csv"));
    let good = (std::fs::read(&json_path).unwrap(), std::fs::read(&csv_path).unwrap());
    // The whole text replaced by one whose speed limit makes the move impossible in time.
    let infeasible = HOP
        .replace("u [m/s^2]: in -10 .. 10", "u [m/s^2]: in -5 .. 5")
        .replace("solve {", "path {\n  speed: v <= 1.3\n}\n\nsolve {");
    let all = json!([{ "text": infeasible }]);
    client.change(&uri, 2, all).await;
    client.save(&uri).await;
    check(client.solve_finished().await, expect!["locally infeasible"]);
    assert_eq!(std::fs::read(&json_path).unwrap(), good.0, "solution file replaced");
    assert_eq!(std::fs::read(&csv_path).unwrap(), good.1, "table replaced");
    let failed: Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("hop.failed.json")).unwrap())
            .unwrap();
    assert_eq!(failed["status"], "locally infeasible");
    assert_eq!(failed["solved"], false);
    assert!(failed["findings"].is_array(), "{}", failed["findings"]);
    // The editor shows the last iterate as what it is.
    let range = json!({
        "textDocument": { "uri": uri },
        "range": { "start": at(0, 0), "end": at(40, 0) }
    });
    let hints = client.request("textDocument/inlayHint", range).await;
    let labels: Vec<&str> =
        hints.as_array().unwrap().iter().map(|h| h["label"].as_str().unwrap()).collect();
    assert!(!labels.is_empty() && labels.iter().all(|l| l.ends_with("(not solved)")), "{labels:?}");
}

#[tokio::test]
async fn secondary_labels_reach_clients_that_do_not_show_related_information() {
    // `x' = u` with `u` in m and `x` in m: the rate is off by a time; the finding's second
    // label ("`m` per `s`", on the state's line) is related information, which Neovim does
    // not show.
    let text = "problem labels\ntime t [s]: start 0, end 1\nstate {\n  x [m]: start 0\n}\ncontrol { u [m]: in -1 .. 1 }\ndynamics {\n  x' = u\n}\ncost { minimize integral(u^2) }\n";
    let mut plain = TestClient::start();
    plain.initialize(json!({ "solveOnSave": false })).await;
    plain.open(URI, text).await;
    let folded = plain.diagnostics(URI, 1).await;
    assert_eq!(folded.len(), 1, "{folded:?}");
    let message = folded[0]["message"].as_str().unwrap();
    assert!(message.contains("\nline 8: `m` per `s`"), "{message}");
    assert!(folded[0]["relatedInformation"].is_null());

    let mut rich = TestClient::start();
    let capabilities =
        json!({ "textDocument": { "publishDiagnostics": { "relatedInformation": true } } });
    rich.initialize_with(capabilities, json!({ "solveOnSave": false })).await;
    rich.open(URI, text).await;
    let related = rich.diagnostics(URI, 1).await;
    assert!(!related[0]["message"].as_str().unwrap().contains("\nline 8:"), "{related:?}");
    assert_eq!(related[0]["relatedInformation"][0]["message"], "`m` per `s`");
}
