fn main() {
    let arg = std::env::args().nth(1).unwrap();
    if let Ok(n) = arg.parse::<usize>() {
        for depth in [24usize, 28, 32, 40] {
            let text = format!("problem p\nconst {{ a = {}1{} }}\n", "(".repeat(depth), ")".repeat(depth));
            let h = std::thread::Builder::new().stack_size(n).spawn(move || costate_syntax::parse(&text).diagnostics.len()).unwrap();
            println!("depth {depth}: {:?}", h.join().is_ok());
        }
        return;
    }
    let text = std::fs::read_to_string(&arg).unwrap();
    let t = std::time::Instant::now();
    let p = costate_syntax::parse(&text);
    eprintln!("parsed in {:?}", t.elapsed());
    if std::env::args().nth(2).is_some() { println!("{:#?}", p.file); }
    for d in &p.diagnostics { println!("{} {:?} {} [{}] {:?}", d.code.id, d.primary.span, d.message, d.primary.message, d.help); }
}
