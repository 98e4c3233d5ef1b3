fn main() {
    let path = std::env::args().nth(1).unwrap();
    let text = std::fs::read_to_string(path).unwrap();
    let p = costate_syntax::parse(&text);
    if std::env::args().nth(2).is_some() {
        println!("{:#?}", p.file);
    }
    for d in &p.diagnostics {
        println!(
            "{} {:?} {} [{}] {:?}",
            d.code.id, d.primary.span, d.message, d.primary.message, d.help
        );
    }
}
