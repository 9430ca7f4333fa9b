// Small DOM helpers shared by the panels: find by id, show problems in plain words,
// busy buttons.

export const $ = (id) => document.getElementById(id);

export function el(tag, attrs = {}, ...children) {
  const node = document.createElement(tag);
  for (const [k, v] of Object.entries(attrs)) {
    if (k === "text") node.textContent = v;
    else node.setAttribute(k, v);
  }
  node.append(...children);
  return node;
}

/** Show messages (strings) in a problems box, or hide it when there are none. */
export function showProblems(box, messages, lead = "") {
  box.replaceChildren();
  if (!messages.length) { box.hidden = true; return; }
  if (lead) box.append(el("p", { text: lead }));
  const list = el("ul");
  for (const m of messages) list.append(el("li", { text: m }));
  box.append(list);
  box.hidden = false;
}

/** Messages of an API error: its detail, then one line per named field. */
export function errorMessages(error) {
  const fields = error.fields || [];
  const lines = fields.map((f) => `${f.field ? f.field.replace(/^body\./, "") + ": " : ""}${f.message}`);
  return [error.message, ...lines.filter((l) => !error.message.includes(l))];
}

export function status(text) {
  $("status").textContent = text;
}

/** Run `work` with `button` disabled; errors go to `box` in plain words. */
export async function busy(button, box, work) {
  button.disabled = true;
  showProblems(box, []);
  try {
    return await work();
  } catch (error) {
    showProblems(box, errorMessages(error));
    status("");
    return undefined;
  } finally {
    button.disabled = false;
  }
}

export function fillSelect(select, names) {
  select.replaceChildren(...names.map((n) => el("option", { value: n, text: n })));
}
