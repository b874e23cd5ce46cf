//! openapi.yaml describes every route the router serves.

use yaml_rust2::YamlLoader;

#[test]
fn openapi_parses_and_lists_every_served_route() {
    let text =
        std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/openapi.yaml")).unwrap();
    let docs = YamlLoader::load_from_str(&text).expect("openapi.yaml is valid YAML");
    let doc = &docs[0];
    assert!(
        doc["openapi"].as_str().unwrap().starts_with("3.1"),
        "OpenAPI 3.1"
    );
    let served = proctor::http::routes();
    for (method, path) in &served {
        let op = &doc["paths"][*path][*method];
        assert!(!op.is_badvalue(), "openapi.yaml lacks {method} {path}");
        assert!(
            op["responses"].as_hash().is_some_and(|r| !r.is_empty()),
            "{method} {path} has no responses"
        );
    }
    let documented = doc["paths"].as_hash().unwrap();
    for (path, ops) in documented {
        for (method, _) in ops.as_hash().unwrap() {
            let (p, m) = (path.as_str().unwrap(), method.as_str().unwrap());
            if ["get", "post", "put", "delete", "patch"].contains(&m) {
                assert!(
                    served.contains(&(m, p)),
                    "openapi.yaml documents {m} {p}, which is not served"
                );
            }
        }
    }
}
