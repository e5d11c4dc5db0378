/**
 * Text from the data (class names, column names, file names, the seed) is data, never markup.
 * Every such value reaches the page through `escapeText`, which leaves nothing the HTML parser
 * could read as a tag, an entity or the end of an attribute: `<img src=x onerror=…>` or
 * `</script>` arrive as the characters they are. The page builders take raw strings and escape
 * at the point of output, so there is one place to get right.
 */

const ENTITIES: Record<string, string> = { '&': '&amp;', '<': '&lt;', '>': '&gt;', '"': '&quot;', "'": '&#39;' };

/** Escapes text for an element's content or a double- or single-quoted attribute value. */
export function escapeText(s: string): string {
  return showControls(s).replace(/[&<>"']/g, (c) => ENTITIES[c]!);
}

/**
 * Control characters made visible (a line break in a class name would fold away in HTML, and a
 * NUL is not allowed in a document): `\n`, `\t`, `\x07`. Lone surrogates become U+FFFD, which
 * the page's UTF-8 encoding could not carry otherwise.
 */
export function showControls(s: string): string {
  // eslint-disable-next-line no-control-regex
  return s
    .replace(/[\u0000-\u001f\u007f]/g, (c) => (c === '\n' ? '\\n' : c === '\r' ? '\\r' : c === '\t' ? '\\t' : `\\x${c.charCodeAt(0).toString(16).padStart(2, '0')}`))
    .replace(/[\ud800-\udbff](?![\udc00-\udfff])|(?<![\ud800-\udbff])[\udc00-\udfff]/g, '\ufffd');
}

/** An identifier safe to use as an attribute value or a fragment (derived from our own keys, never from data). */
export function safeId(s: string): string {
  return s.replace(/[^A-Za-z0-9_.-]/g, '_');
}
