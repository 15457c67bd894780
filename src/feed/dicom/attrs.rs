//! Attribute access with messages that name the attribute.

use super::*;

// Attribute access with messages that name the attribute.

/// A text value, trimmed of padding; None when absent or empty.
pub(super) fn text(obj: &InMemDicomObject, tag: Tag) -> Option<String> {
    obj.get(tag).and_then(element_text)
}

pub(super) fn element_text(element: &InMemElement) -> Option<String> {
    let text = element.value().to_multi_str().ok()?.iter().map(|s| s.trim_matches([' ', '\0'])).collect::<Vec<_>>().join("\\");
    (!text.is_empty()).then_some(text)
}

pub(super) fn optional_int(obj: &InMemDicomObject, tag: Tag, name: &str) -> std::result::Result<Option<usize>, Problem> {
    let Some(element) = obj.get(tag).filter(|e| !is_empty(e)) else {
        return Ok(None);
    };
    element.to_int::<i64>().ok().and_then(|v| usize::try_from(v).ok()).map(Some).ok_or_else(|| {
        let shown = element.to_str().map(Cow::into_owned).unwrap_or_else(|_| "unreadable".into());
        format!(
            "has {name} ({:04X},{:04X}) = '{shown}', which is not a whole number of 0 or more. \
             Fix the header (for example with dcmodify) or ask the sender for a valid file.",
            tag.group(),
            tag.element()
        )
    })
}

pub(super) fn required_int(obj: &InMemDicomObject, tag: Tag, name: &str) -> std::result::Result<usize, Problem> {
    optional_int(obj, tag, name)?.ok_or_else(|| {
        format!("has pixel data but no {name} ({:04X},{:04X}). Fix the header (it is required).", tag.group(), tag.element())
    })
}

pub(super) fn optional_floats(obj: &InMemDicomObject, tag: Tag, name: &str) -> std::result::Result<Vec<f64>, Problem> {
    let Some(element) = obj.get(tag) else { return Ok(Vec::new()) };
    if is_empty(element) {
        return Ok(Vec::new());
    }
    element.to_multi_float64().ok().filter(|v| v.iter().all(|x| x.is_finite())).ok_or_else(|| {
        let shown = element.to_str().map(Cow::into_owned).unwrap_or_else(|_| "unreadable".into());
        format!(
            "has {name} ({:04X},{:04X}) = '{shown}', which is not a list of numbers. Fix the header.",
            tag.group(),
            tag.element()
        )
    })
}

pub(super) fn optional_float(obj: &InMemDicomObject, tag: Tag, name: &str) -> std::result::Result<Option<f64>, Problem> {
    Ok(optional_floats(obj, tag, name)?.first().copied())
}

pub(super) fn is_empty(element: &InMemElement) -> bool {
    element.value().primitive().is_some_and(|p| matches!(p, PrimitiveValue::Empty) || p.to_str().trim().is_empty())
}

pub(super) fn first_item(obj: &InMemDicomObject, tag: Tag) -> Option<&InMemDicomObject> {
    obj.get(tag).and_then(|e| e.items()).and_then(|items| items.first())
}

