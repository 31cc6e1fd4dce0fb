//! The baseline for the load benchmark: a bare actix-web server that does the least any JSON
//! scoring service must do (read the body within the same size limit, parse it into a
//! `serde_json::Value`, answer a constant JSON body) and nothing else: no model, no routes
//! beyond one, no middleware, no metrics, no logs.
//!
//! ```text
//! cargo run --release --example bare_actix -- 127.0.0.1:0 WORKERS
//! ```
//!
//! It prints `listening on ADDR` and serves until killed; `benches/load/run.sh` starts it beside
//! `ogive serve` and measures both in the same run.

use std::net::TcpListener;

use actix_web::{web, App, HttpResponse, HttpServer};

const LIMIT_BYTES: usize = 8 * 1024 * 1024;
const ANSWER: &str = r#"{"probability":0.5}"#;

async fn answer(body: web::Bytes) -> HttpResponse {
    match serde_json::from_slice::<serde_json::Value>(&body) {
        Ok(value) => {
            std::hint::black_box(&value);
            HttpResponse::Ok()
                .content_type("application/json")
                .body(ANSWER)
        }
        Err(_) => HttpResponse::BadRequest().finish(),
    }
}

fn main() -> std::io::Result<()> {
    let mut args = std::env::args().skip(1);
    let listen = args.next().unwrap_or_else(|| "127.0.0.1:0".to_string());
    let workers: usize = args.next().and_then(|w| w.parse().ok()).unwrap_or(2);
    let listener = TcpListener::bind(&listen)?;
    println!("listening on {}", listener.local_addr()?);
    actix_web::rt::System::new().block_on(async move {
        HttpServer::new(|| {
            App::new()
                .app_data(web::PayloadConfig::new(LIMIT_BYTES))
                .default_service(web::post().to(answer))
        })
        .workers(workers)
        .listen(listener)?
        .run()
        .await
    })
}
