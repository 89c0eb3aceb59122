//! Store failures as the library's error: one sentence naming the URL and the reason,
//! the client's error kept as the cause.

use crate::error::Error;

/// The whole chain of an error's messages, for recognising the store's error code.
fn chain(e: &(dyn std::error::Error + 'static)) -> String {
    let mut text = e.to_string();
    let mut cur = e.source();
    while let Some(s) = cur {
        text.push_str(": ");
        text.push_str(&s.to_string());
        cur = s.source();
    }
    text
}

/// The error for a failed request on `url`, with the reason in words.
pub(crate) fn store_error(url: &str, e: object_store::Error) -> Error {
    let text = chain(&e);
    let reason = if text.contains("NoSuchBucket") {
        "the bucket does not exist".to_string()
    } else {
        match &e {
            // The server's code first: a refused key comes back as 403 like a refused right.
            _ if text.contains("InvalidAccessKeyId") || text.contains("SignatureDoesNotMatch") => {
                "the credentials were refused (check AWS_ACCESS_KEY_ID and AWS_SECRET_ACCESS_KEY)"
                    .into()
            }
            object_store::Error::NotFound { .. } => "no such object".to_string(),
            object_store::Error::PermissionDenied { .. } => {
                "access was denied (check the bucket policy and the credentials' rights)".into()
            }
            object_store::Error::Unauthenticated { .. } => {
                "the credentials were refused (check AWS_ACCESS_KEY_ID and AWS_SECRET_ACCESS_KEY)"
                    .into()
            }
            _ if text.contains("AccessDenied") => {
                "access was denied (check the bucket policy and the credentials' rights)".into()
            }
            object_store::Error::UnknownConfigurationKey { key, .. } => {
                format!("the store setting '{key}' is not known")
            }
            _ => format!("the request failed after retries ({})", first_line(&text)),
        }
    };
    Error::Store {
        url: url.to_string(),
        message: reason,
        source: Box::new(e),
    }
}

/// The first line of a message, at most 300 characters (server bodies can be long).
fn first_line(s: &str) -> String {
    let line = s.lines().next().unwrap_or("");
    line.chars().take(300).collect()
}
