//! A small well-formedness check of the markup this crate writes, for tests.

/// Checks `doc`: tags balanced and properly nested, one root element, attribute values
/// double-quoted, no raw `<` or `>` in text or values, every `&` the start of an entity.
/// `<!...>` declarations are skipped; elements named in `void` need no end tag.
/// Returns the number of elements.
pub(crate) fn check(doc: &str, void: &[&str]) -> Result<usize, String> {
    let mut stack: Vec<String> = Vec::new();
    let mut rest = doc;
    let mut elements = 0;
    let mut roots = 0;
    loop {
        let Some(i) = rest.find('<') else {
            text(rest)?;
            break;
        };
        text(&rest[..i])?;
        if !rest[..i].trim().is_empty() && stack.is_empty() {
            return Err(format!("text outside the root: {:?}", &rest[..i]));
        }
        rest = &rest[i..];
        if rest.starts_with("<!") {
            let end = rest.find('>').ok_or("unterminated declaration")?;
            rest = &rest[end + 1..];
            continue;
        }
        let end = tag_end(rest).ok_or_else(|| format!("unterminated tag: {rest:.40}"))?;
        let tag = &rest[1..end];
        rest = &rest[end + 1..];
        if let Some(name) = tag.strip_prefix('/') {
            let open = stack.pop().ok_or_else(|| format!("stray </{name}>"))?;
            if open != name.trim() {
                return Err(format!("<{open}> closed by </{name}>"));
            }
            continue;
        }
        let self_closing = tag.ends_with('/');
        let body = tag.trim_end_matches('/');
        let (name, attrs) = body.split_once(char::is_whitespace).unwrap_or((body, ""));
        if name.is_empty() || !name.chars().all(|c| c.is_ascii_alphanumeric() || c == '-') {
            return Err(format!("bad element name in <{tag}>"));
        }
        attributes(attrs)?;
        if stack.is_empty() {
            roots += 1;
        }
        elements += 1;
        if !self_closing && !void.contains(&name) {
            stack.push(name.to_string());
        }
    }
    if let Some(open) = stack.pop() {
        return Err(format!("<{open}> never closed"));
    }
    if roots != 1 {
        return Err(format!("{roots} root elements"));
    }
    Ok(elements)
}

fn tag_end(s: &str) -> Option<usize> {
    let mut quoted = false;
    for (i, c) in s.char_indices().skip(1) {
        match c {
            '"' => quoted = !quoted,
            '>' if !quoted => return Some(i),
            '<' if !quoted => return None,
            _ => {}
        }
    }
    None
}

fn text(s: &str) -> Result<(), String> {
    if s.contains('>') {
        return Err(format!("raw '>' in {s:?}"));
    }
    let mut rest = s;
    while let Some(i) = rest.find('&') {
        rest = &rest[i + 1..];
        let end = rest.find(';').ok_or_else(|| format!("bare '&' in {s:?}"))?;
        let entity = &rest[..end];
        let ok = matches!(entity, "amp" | "lt" | "gt" | "quot" | "apos")
            || entity
                .strip_prefix('#')
                .is_some_and(|n| !n.is_empty() && n.chars().all(|c| c.is_ascii_digit()));
        if !ok {
            return Err(format!("bad entity &{entity}; in {s:?}"));
        }
    }
    Ok(())
}

fn attributes(mut s: &str) -> Result<(), String> {
    loop {
        s = s.trim_start();
        if s.is_empty() {
            return Ok(());
        }
        let eq = s
            .find('=')
            .ok_or_else(|| format!("attribute without value: {s}"))?;
        let name = &s[..eq];
        if name.is_empty()
            || !name
                .chars()
                .all(|c| c.is_ascii_alphanumeric() || matches!(c, '-' | ':' | '_'))
        {
            return Err(format!("bad attribute name {name:?}"));
        }
        let value = s[eq + 1..]
            .strip_prefix('"')
            .ok_or_else(|| format!("unquoted value of {name}"))?;
        let close = value.find('"').ok_or("unterminated value")?;
        text(&value[..close])?;
        if value[..close].contains('<') {
            return Err(format!("raw '<' in value of {name}"));
        }
        s = &value[close + 1..];
        if !s.is_empty() && !s.starts_with(char::is_whitespace) {
            return Err(format!("no space after value of {name}"));
        }
    }
}
