use horosphere::map::{map_to_sphere, MapOptions};
use horosphere::mesh::shapes::icosphere;

#[test]
fn smoke() {
    let mut m = icosphere(2, 1.0);
    for p in &mut m.positions { p[2] *= 2.0; }
    match map_to_sphere(&m, &MapOptions::default()) {
        Ok(r) => {
            let mut rep = r.report.clone();
            rep.iteration_log.truncate(0);
            eprintln!("{}", serde_json::to_string_pretty(&rep).unwrap());
            for it in &r.report.iteration_log { eprintln!("{:?}", it); }
        }
        Err(e) => panic!("{e}"),
    }
}
