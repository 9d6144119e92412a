//! HTML building blocks: escaping, addresses, tables and the page frame (navigation, the
//! safety caution, the script and style sheet). Every text that comes from the store or the
//! request goes through [`escape`] or [`path_part`]/[`query_value`].

use crate::error::WebError;

/// `text` safe inside HTML text and double- or single-quoted attributes.
pub fn escape(text: &str) -> String {
    let mut escaped = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => escaped.push_str("&amp;"),
            '<' => escaped.push_str("&lt;"),
            '>' => escaped.push_str("&gt;"),
            '"' => escaped.push_str("&quot;"),
            '\'' => escaped.push_str("&#39;"),
            other => escaped.push(other),
        }
    }
    escaped
}

/// `text` percent-encoded as one path segment (RFC 3986: only unreserved characters stay).
pub fn path_part(text: &str) -> String {
    let mut encoded = String::with_capacity(text.len());
    for byte in text.bytes() {
        if byte.is_ascii_alphanumeric() || matches!(byte, b'-' | b'.' | b'_' | b'~') {
            encoded.push(byte as char);
        } else {
            encoded.push_str(&format!("%{byte:02X}"));
        }
    }
    encoded
}

/// `text` percent-encoded as a query value (the same rule as a path segment).
pub fn query_value(text: &str) -> String {
    path_part(text)
}

/// The address of a fleet's page, `suffix` appended (e.g. "/due").
pub fn fleet_href(fleet_id: &str, suffix: &str) -> String {
    format!("/fleets/{}{suffix}", path_part(fleet_id))
}

/// The address of a vehicle's page.
pub fn vehicle_href(fleet_id: &str, vehicle_id: &str) -> String {
    fleet_href(fleet_id, &format!("/vehicles/{}", path_part(vehicle_id)))
}

/// A link; `href` must already be an address made here, `text` is escaped.
pub fn link(href: &str, text: &str) -> String {
    format!("<a href=\"{}\">{}</a>", escape(href), escape(text))
}

/// A table: header cells (escaped) and rows of cells that are already HTML, each row with
/// a CSS class (may be empty).
pub fn table(id: &str, header: &[&str], rows: &[(String, Vec<String>)]) -> String {
    let mut out = format!("<table id=\"{}\"><thead><tr>", escape(id));
    for cell in header {
        out.push_str(&format!("<th>{}</th>", escape(cell)));
    }
    out.push_str("</tr></thead><tbody>");
    for (class, cells) in rows {
        out.push_str(&format!("<tr class=\"{}\">", escape(class)));
        for cell in cells {
            out.push_str(&format!("<td>{cell}</td>"));
        }
        out.push_str("</tr>");
    }
    out.push_str("</tbody></table>");
    out
}

/// A status badge (overdue, due now, due, cannot forecast, ...).
pub fn badge(status: &str) -> String {
    format!("<span class=\"badge {}\">{}</span>", escape(&status.replace(' ', "-")), escape(status))
}

/// A whole page: title, navigation for `fleet_id` (when given), the caution, `body` (HTML).
pub fn page(title: &str, fleet_id: Option<&str>, body: &str) -> String {
    let nav = match fleet_id {
        Some(fleet) => format!(
            "<nav>{} · {} · {} · {} {}<form method=\"post\" action=\"/sign-out\" class=\"sign-out\"><button>Sign out</button></form></nav>",
            link("/", "Fleets"),
            link(&fleet_href(fleet, ""), &format!("Fleet {fleet}")),
            link(&fleet_href(fleet, "/due"), "Due list"),
            link(&fleet_href(fleet, "/plan"), "Visit plan"),
            "<span class=\"muted\">brakeledger</span>"
        ),
        None => format!("<nav>{} <span class=\"muted\">brakeledger</span><form method=\"post\" action=\"/sign-out\" class=\"sign-out\"><button>Sign out</button></form></nav>", link("/", "Fleets")),
    };
    format!(
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\
<title>{title} · brakeledger</title><link rel=\"stylesheet\" href=\"/assets/style.css\"><script src=\"/assets/page.js\" defer></script></head>\
<body>{nav}<main><h1>{title}</h1><p class=\"caution\" id=\"caution\">{caution}</p>{body}</main>\
<footer>Forecasts are dated in the fleet's time zone. {caution}</footer></body></html>\n",
        title = escape(title),
        caution = escape(crate::SAFETY_CAUTION),
    )
}

/// The page that reports an error; a refusal for want of a token carries the sign-in form.
pub fn error_page(status: http::StatusCode, error: &WebError) -> String {
    let sign_in = if status == http::StatusCode::UNAUTHORIZED { crate::web::session::sign_in_box("") } else { String::new() };
    page(
        status.canonical_reason().unwrap_or("Error"),
        None,
        &format!("<p class=\"error\" id=\"error\">{}</p>{sign_in}<p>{}</p>", escape(&error.to_string()), link("/", "Back to the fleets")),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn markup_and_addresses_are_escaped() {
        assert_eq!(escape("<b a='x'>\"&"), "&lt;b a=&#39;x&#39;&gt;&quot;&amp;");
        assert_eq!(path_part("bus 17/ä?#"), "bus%2017%2F%C3%A4%3F%23");
        assert_eq!(vehicle_href("north", "van-1"), "/fleets/north/vehicles/van-1");
        let page = page("<x>", Some("<f>"), "");
        assert!(!page.contains("<x>") && !page.contains("<f>"), "{page}");
        assert!(page.contains("roadworthiness rules"), "the caution is on every page");
    }
}
