//! The floor for the load benchmark: a bare actix-web server that does the least any JSON
//! scoring service must do (read the body within the same size limit, parse it into a
//! `serde_json::Value`) and then answers *the same bytes* `ogive serve` answered to that load:
//! the body and the headers captured from ogive at the start of the run. No model, no metrics,
//! no logs, no middleware; so what ogive costs beyond this floor is its own work, not the size
//! of its answers.
//!
//! ```text
//! cargo run --release --example bare_actix -- 127.0.0.1:0 WORKERS NAME=DIR [NAME=DIR ...]
//! ```
//!
//! Each `NAME=DIR` serves `POST /NAME` from `DIR/body` (the answer's bytes) and `DIR/headers`
//! (the answer's header lines as `curl -D` wrote them; the status line, `content-length`,
//! `date` and `connection` are left to actix). It prints `listening on ADDR` and serves until
//! killed; `benches/load/run.sh` starts it beside `ogive serve` and measures both in one run.

use std::collections::HashMap;
use std::net::TcpListener;
use std::path::Path;
use std::sync::Arc;

use actix_web::http::header::{HeaderName, HeaderValue};
use actix_web::{web, App, HttpRequest, HttpResponse, HttpServer};

const LIMIT_BYTES: usize = 8 * 1024 * 1024;

/// One captured answer.
struct Answer {
    headers: Vec<(HeaderName, HeaderValue)>,
    body: web::Bytes,
}

fn read_answer(dir: &Path) -> std::io::Result<Answer> {
    let body = std::fs::read(dir.join("body"))?;
    let text = std::fs::read_to_string(dir.join("headers"))?;
    let mut headers = Vec::new();
    for line in text.lines().skip(1) {
        let Some((name, value)) = line.split_once(':') else {
            continue;
        };
        let name = name.trim().to_ascii_lowercase();
        if matches!(
            name.as_str(),
            "content-length" | "date" | "connection" | "transfer-encoding"
        ) {
            continue;
        }
        let bad = |e: String| std::io::Error::new(std::io::ErrorKind::InvalidData, e);
        headers.push((
            HeaderName::from_bytes(name.as_bytes()).map_err(|e| bad(e.to_string()))?,
            HeaderValue::from_str(value.trim()).map_err(|e| bad(e.to_string()))?,
        ));
    }
    Ok(Answer {
        headers,
        body: web::Bytes::from(body),
    })
}

async fn answer(
    req: HttpRequest,
    body: web::Bytes,
    answers: web::Data<HashMap<String, Answer>>,
) -> HttpResponse {
    let Some(answer) = answers.get(req.path().trim_start_matches('/')) else {
        return HttpResponse::NotFound().finish();
    };
    match serde_json::from_slice::<serde_json::Value>(&body) {
        Ok(value) => {
            std::hint::black_box(&value);
            let mut response = HttpResponse::Ok();
            for (name, value) in &answer.headers {
                response.insert_header((name.clone(), value.clone()));
            }
            response.body(answer.body.clone())
        }
        Err(_) => HttpResponse::BadRequest().finish(),
    }
}

fn main() -> std::io::Result<()> {
    let mut args = std::env::args().skip(1);
    let listen = args.next().unwrap_or_else(|| "127.0.0.1:0".to_string());
    let workers: usize = args.next().and_then(|w| w.parse().ok()).unwrap_or(2);
    let mut answers = HashMap::new();
    for spec in args {
        let (name, dir) = spec.split_once('=').ok_or_else(|| {
            std::io::Error::new(
                std::io::ErrorKind::InvalidInput,
                format!("'{spec}' is not NAME=DIR"),
            )
        })?;
        answers.insert(name.to_string(), read_answer(Path::new(dir))?);
    }
    let answers = web::Data::from(Arc::new(answers));
    let listener = TcpListener::bind(&listen)?;
    println!("listening on {}", listener.local_addr()?);
    actix_web::rt::System::new().block_on(async move {
        HttpServer::new(move || {
            App::new()
                .app_data(web::PayloadConfig::new(LIMIT_BYTES))
                .app_data(answers.clone())
                .default_service(web::post().to(answer))
        })
        .workers(workers)
        .listen(listener)?
        .run()
        .await
    })
}
