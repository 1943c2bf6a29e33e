// Signing in on a team server (people defined): asks for the personal access token once, POST /api/session
// sets an HttpOnly cookie, and the page reloads signed in. The signed-in name replaces "You are" (changes
// are recorded under it by the server) and a "Sign out" button appears. On a laptop server nothing shows.
import { state } from "./state.js";

async function session(method, json) {
  const res = await fetch("/api/session", {
    method, credentials: "same-origin",
    headers: json ? { "Content-Type": "application/json" } : {},
    body: json ? JSON.stringify(json) : undefined,
  });
  const text = await res.text();
  let data = null;
  try { data = text ? JSON.parse(text) : null; } catch { data = null; }
  return { ok: res.ok, data };
}

function el(tag, props = {}, ...children) {
  const node = document.createElement(tag);
  Object.assign(node, props);
  for (const child of children) node.append(child);
  return node;
}

function showSignIn() {
  const input = el("input", { type: "password", id: "signin-token", required: true, autocomplete: "current-password",
                              spellcheck: false, size: 40 });
  const problem = el("p", { id: "signin-problem", className: "signin-problem" });
  problem.setAttribute("role", "alert");
  const form = el("form", { method: "dialog" },
    el("h2", { id: "signin-title", textContent: "Sign in" }),
    el("p", { textContent: "This Scalewright server is shared by a team. Paste the personal access token you "
                           + "were given (scalewright people add)." }),
    el("label", {}, "Access token", input), problem,
    el("p", {}, el("button", { type: "submit", textContent: "Sign in" })));
  const dialog = el("dialog", { id: "signin-dialog" }, form);
  dialog.setAttribute("aria-labelledby", "signin-title");
  input.setAttribute("aria-describedby", "signin-problem");
  form.addEventListener("submit", async (event) => {
    event.preventDefault();
    problem.textContent = "";
    const { ok, data } = await session("POST", { token: input.value.trim() });
    if (ok) { location.reload(); return; }
    problem.textContent = (data && data.error && data.error.message) || "The server refused the token.";
    input.focus();
  });
  document.body.append(dialog);
  dialog.showModal();
  input.focus();
}

function showSignedIn(person) {
  state.who = person.name;  // main.js fills "You are" from it, whichever of the two runs first
  const who = document.getElementById("who");
  if (who) {  // the server records changes under the signed-in name, so it is shown, not typed
    who.value = person.name;
    who.readOnly = true;
    who.title = `${person.role} in the workspace ${person.workspace}`;
  }
  const out = el("button", { type: "button", className: "signout", textContent: "Sign out" });
  out.title = `Signed in as ${person.name} (${person.role}, workspace ${person.workspace})`;
  out.addEventListener("click", async () => { await session("DELETE"); location.reload(); });
  const anchor = who && who.closest("label");
  if (anchor) anchor.after(out); else document.body.append(out);
}

const { ok, data } = await session("GET");
if (ok && data && data.team) {
  if (data.name) showSignedIn(data); else showSignIn();
}
