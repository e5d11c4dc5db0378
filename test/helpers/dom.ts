/**
 * A small reader for the DOM Chromium prints with --dump-dom: its HTML serialisation (HTML Living
 * Standard, "Serialising HTML fragments"): attribute values double-quoted with &amp; &quot; and
 * &nbsp; escaped, text with &amp; &lt; &gt; &nbsp;, the void elements without end tags, and the
 * contents of <style> and <script> raw. Enough to walk what the browser built; not a general
 * HTML parser.
 */

export interface DomElement {
  tag: string;
  attrs: Map<string, string>;
  children: DomNode[];
  parent: DomElement | null;
}
export type DomNode = DomElement | string;

const VOID = new Set(['area', 'base', 'br', 'col', 'embed', 'hr', 'img', 'input', 'link', 'meta', 'source', 'track', 'wbr']);
const RAW = new Set(['script', 'style']);

export function decodeEntities(s: string): string {
  return s.replace(/&(#x[0-9a-fA-F]+|#\d+|amp|lt|gt|quot|apos|nbsp);/g, (_, e: string) => {
    if (e[0] === '#') return String.fromCodePoint(e[1] === 'x' ? parseInt(e.slice(2), 16) : Number(e.slice(1)));
    return ({ amp: '&', lt: '<', gt: '>', quot: '"', apos: "'", nbsp: '\u00a0' } as Record<string, string>)[e]!;
  });
}

export function parseDom(html: string): DomElement {
  const root: DomElement = { tag: '#root', attrs: new Map(), children: [], parent: null };
  let cur = root;
  let at = 0;
  while (at < html.length) {
    const lt = html.indexOf('<', at);
    if (lt < 0) {
      cur.children.push(decodeEntities(html.slice(at)));
      break;
    }
    if (lt > at) cur.children.push(decodeEntities(html.slice(at, lt)));
    if (html.startsWith('<!--', lt)) {
      at = html.indexOf('-->', lt) + 3;
      continue;
    }
    if (html.startsWith('<!', lt)) {
      at = html.indexOf('>', lt) + 1;
      continue;
    }
    if (html[lt + 1] === '/') {
      const gt = html.indexOf('>', lt);
      const name = html.slice(lt + 2, gt).trim().toLowerCase();
      // Close up to the matching element (the serialiser always closes what it opens).
      for (let e: DomElement | null = cur; e; e = e.parent) {
        if (e.tag === name) {
          cur = e.parent ?? root;
          break;
        }
      }
      at = gt + 1;
      continue;
    }
    // A start tag: name, then attributes up to '>' (values are quoted, so '>' inside them is safe).
    const m = /^<([A-Za-z][^\s/>]*)/.exec(html.slice(lt, lt + 200))!;
    const name = m[1]!.toLowerCase();
    let i = lt + m[0].length;
    const attrs = new Map<string, string>();
    for (;;) {
      while (/\s/.test(html[i]!)) i++;
      if (html[i] === '>' || html.startsWith('/>', i)) break;
      const an = /^[^\s=>/]+/.exec(html.slice(i, i + 200))![0];
      i += an.length;
      if (html[i] === '=') {
        const q = html[i + 1]!;
        const end = html.indexOf(q, i + 2);
        attrs.set(an.toLowerCase(), decodeEntities(html.slice(i + 2, end)));
        i = end + 1;
      } else attrs.set(an.toLowerCase(), '');
    }
    const selfClosed = html.startsWith('/>', i);
    at = i + (selfClosed ? 2 : 1);
    const el: DomElement = { tag: name, attrs, children: [], parent: cur };
    cur.children.push(el);
    if (RAW.has(name)) {
      const end = html.toLowerCase().indexOf(`</${name}`, at);
      el.children.push(html.slice(at, end));
      at = html.indexOf('>', end) + 1;
    } else if (!VOID.has(name) && !selfClosed) cur = el;
  }
  return root;
}

export function* elements(node: DomElement): Generator<DomElement> {
  for (const c of node.children) {
    if (typeof c === 'string') continue;
    yield c;
    yield* elements(c);
  }
}

export function textOf(node: DomNode): string {
  return typeof node === 'string' ? node : node.children.map(textOf).join('');
}

export function find(root: DomElement, tag: string): DomElement[] {
  return [...elements(root)].filter((e) => e.tag === tag);
}

/** Each text node with the chain of elements above it. */
export function* textNodes(node: DomElement): Generator<{ text: string; parent: DomElement }> {
  for (const c of node.children) {
    if (typeof c === 'string') yield { text: c, parent: node };
    else yield* textNodes(c);
  }
}

export function hasAncestor(e: DomElement | null, test: (e: DomElement) => boolean): boolean {
  for (let x = e; x; x = x.parent) if (test(x)) return true;
  return false;
}
