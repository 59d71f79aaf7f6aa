// Text into HTML: escaped for element content and attribute values alike.
import { BIDI_CONTROLS, escapedControl } from '../format.js';

/**
 * A bidirectional formatting character inside a name (model data) is shown as its code (\u202e), as the text
 * ledger shows it: left in, it reorders how the rest of its line reads on the page.
 */
export function esc(s: string): string {
  return s.replace(/&/g, '&amp;').replace(/</g, '&lt;').replace(/>/g, '&gt;').replace(/"/g, '&quot;').replace(/'/g, '&#39;')
    .replace(BIDI_CONTROLS, escapedControl);
}

