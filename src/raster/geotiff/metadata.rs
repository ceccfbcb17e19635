//! GDAL's metadata tag (42112): a small XML document of `<Item>` elements, documented in
//! GDAL's GTiff driver page. Band descriptions are items named `DESCRIPTION` with
//! `role="description"` and a 0-based `sample` attribute; items without `sample` belong
//! to the dataset. GDAL escapes item text twice (once as a value, once as XML), so text
//! is escaped twice when written and unescaped twice when read.

/// One metadata item.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct MetadataItem {
    /// Item name (`DESCRIPTION`, `AREA_OR_POINT`, …).
    pub name: String,
    /// 1-based band the item belongs to; `None` for the dataset.
    pub band: Option<usize>,
    /// GDAL's role (`description`, `offset`, `scale`, …), if any.
    pub role: Option<String>,
    /// The item's text.
    pub value: String,
}

fn unescape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    let mut rest = s;
    while let Some(i) = rest.find('&') {
        out.push_str(&rest[..i]);
        rest = &rest[i..];
        let Some(end) = rest.find(';') else {
            break;
        };
        let entity = &rest[1..end];
        let ch = match entity {
            "amp" => Some('&'),
            "lt" => Some('<'),
            "gt" => Some('>'),
            "quot" => Some('"'),
            "apos" => Some('\''),
            e if e.starts_with("#x") || e.starts_with("#X") => u32::from_str_radix(&e[2..], 16)
                .ok()
                .and_then(char::from_u32),
            e if e.starts_with('#') => e[1..].parse().ok().and_then(char::from_u32),
            _ => None,
        };
        match ch {
            Some(c) => {
                out.push(c);
                rest = &rest[end + 1..];
            }
            None => {
                out.push('&');
                rest = &rest[1..];
            }
        }
    }
    out.push_str(rest);
    out
}

/// Escape text for an XML attribute or element.
pub fn escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            c => out.push(c),
        }
    }
    out
}

fn attribute(tag: &str, name: &str) -> Option<String> {
    let mut rest = tag;
    loop {
        let i = rest.find(name)?;
        let before_ok = i == 0 || rest[..i].ends_with(char::is_whitespace);
        let after = rest[i + name.len()..].trim_start();
        if before_ok && after.starts_with('=') {
            let v = after[1..].trim_start();
            let quote = v.chars().next()?;
            if quote != '"' && quote != '\'' {
                return None;
            }
            let end = v[1..].find(quote)?;
            return Some(unescape(&v[1..1 + end]));
        }
        rest = &rest[i + name.len()..];
    }
}

/// Parse the items of a GDAL metadata document; malformed parts are skipped.
pub fn parse(xml: &str) -> Vec<MetadataItem> {
    let mut items = Vec::new();
    let mut rest = xml;
    while let Some(start) = rest.find("<Item") {
        rest = &rest[start + 5..];
        let Some(tag_end) = rest.find('>') else {
            break;
        };
        let tag = &rest[..tag_end];
        let self_closing = tag.ends_with('/');
        rest = &rest[tag_end + 1..];
        let value = if self_closing {
            String::new()
        } else {
            let Some(close) = rest.find("</Item>") else {
                break;
            };
            let v = unescape(&unescape(&rest[..close]));
            rest = &rest[close + 7..];
            v
        };
        let Some(name) = attribute(tag, "name") else {
            continue;
        };
        let band = attribute(tag, "sample")
            .and_then(|s| s.trim().parse::<usize>().ok())
            .map(|s| s + 1);
        items.push(MetadataItem {
            name,
            band,
            role: attribute(tag, "role"),
            value,
        });
    }
    items
}

/// A GDAL metadata document with a description item for each band that has one
/// (`descriptions[i]` is band i + 1).
#[cfg(test)]
pub fn build(descriptions: &[Option<String>]) -> Option<String> {
    build_bands(descriptions, &[])
}

/// A GDAL metadata document with, for each band that has them, its description and its
/// units (`descriptions[i]`, `units[i]` are band i + 1's). Units are the band's unit
/// type, the item GDAL's GTiff driver documents as `UNITTYPE` with role `unittype` (read
/// back by GDAL-based tools as the band's units); values are escaped as GDAL escapes them.
pub fn build_bands(descriptions: &[Option<String>], units: &[Option<String>]) -> Option<String> {
    if descriptions.iter().chain(units).all(|d| d.is_none()) {
        return None;
    }
    let mut xml = String::from("<GDALMetadata>\n");
    for i in 0..descriptions.len().max(units.len()) {
        if let Some(Some(d)) = descriptions.get(i) {
            xml.push_str(&format!(
                "  <Item name=\"DESCRIPTION\" sample=\"{i}\" role=\"description\">{}</Item>\n",
                escape(&escape(d))
            ));
        }
        if let Some(Some(u)) = units.get(i) {
            xml.push_str(&format!(
                "  <Item name=\"UNITTYPE\" sample=\"{i}\" role=\"unittype\">{}</Item>\n",
                escape(&escape(u))
            ));
        }
    }
    xml.push_str("</GDALMetadata>");
    Some(xml)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gdal_description_items() {
        // Layout as documented for GDAL's GTiff driver (band descriptions, sample 0-based).
        let xml = "<GDALMetadata>\n  <Item name=\"AREA_OR_POINT\">Area</Item>\n  \
                   <Item name=\"DESCRIPTION\" sample=\"0\" role=\"description\">slope_horn</Item>\n  \
                   <Item name=\"DESCRIPTION\" sample=\"2\" role=\"description\">a &amp; b &lt;c&gt;</Item>\n\
                   </GDALMetadata>";
        let items = parse(xml);
        assert_eq!(items.len(), 3);
        assert_eq!(items[0].band, None);
        assert_eq!(items[0].value, "Area");
        assert_eq!(items[1].band, Some(1));
        assert_eq!(items[1].role.as_deref(), Some("description"));
        assert_eq!(items[1].value, "slope_horn");
        assert_eq!(items[2].band, Some(3));
        assert_eq!(items[2].value, "a & b <c>");
    }

    #[test]
    fn gdal_double_escaping() {
        // Bytes GDAL 3.10 wrote (through rasterio) for the description `x <&> "q" y`.
        let xml = "<GDALMetadata>\n  <Item name=\"DESCRIPTION\" sample=\"0\" role=\"description\">\
                   x &amp;lt;&amp;amp;&amp;gt; &amp;quot;q&amp;quot; y</Item>\n</GDALMetadata>\n";
        let items = parse(xml);
        assert_eq!(items[0].value, "x <&> \"q\" y");
        let ours = build(&[Some("x <&> \"q\" y".to_string())]).unwrap();
        assert!(
            ours.contains("x &amp;lt;&amp;amp;&amp;gt; &amp;quot;q&amp;quot; y"),
            "{ours}"
        );
    }

    #[test]
    fn build_then_parse() {
        let d = vec![
            Some("tpi_r5m".to_string()),
            None,
            Some("x \"q\" & y".to_string()),
        ];
        let items = parse(&build(&d).unwrap());
        assert_eq!(items.len(), 2);
        assert_eq!(items[1].band, Some(3));
        assert_eq!(items[1].value, "x \"q\" & y");
        assert_eq!(build(&[None, None]), None);
    }

    #[test]
    fn units_are_unittype_items() {
        // Item layout of a band's unit type as GDAL's GTiff driver documents it
        // (name UNITTYPE, role unittype, sample 0-based).
        let d = vec![Some("slope".to_string()), Some("ndvi".to_string())];
        let u = vec![Some("degrees".to_string()), None];
        let xml = build_bands(&d, &u).unwrap();
        assert!(
            xml.contains("<Item name=\"UNITTYPE\" sample=\"0\" role=\"unittype\">degrees</Item>"),
            "{xml}"
        );
        let items = parse(&xml);
        assert_eq!(items.len(), 3);
        assert_eq!(items[1].role.as_deref(), Some("unittype"));
        assert_eq!(
            (items[1].band, items[1].value.as_str()),
            (Some(1), "degrees")
        );
        assert_eq!(
            build_bands(&[None], &[Some("m".into())])
                .unwrap()
                .matches("<Item")
                .count(),
            1
        );
    }

    #[test]
    fn malformed_is_skipped() {
        assert!(parse("<Item name=\"A\">unterminated").is_empty());
        assert!(parse("<Item >x</Item>").is_empty());
        assert_eq!(parse("&&&<Item name='B'/>")[0].name, "B");
    }
}
