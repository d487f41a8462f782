// The coding desk. Every value from the data is put on the page with textContent, never as HTML.
"use strict";
(function () {
  const token = new URLSearchParams(location.search).get("token") || "";
  const $ = (id) => document.getElementById(id);
  let view = null;          // the state the server last sent
  let chosen = null;        // {action: "code"|"uncodable", code, label}
  let found = [];           // current look-up results
  let lit = -1;             // highlighted look-up result
  let searchSeq = 0;
  let busy = false;

  function el(tag, cls, text) {
    const node = document.createElement(tag);
    if (cls) node.className = cls;
    if (text !== undefined && text !== null) node.textContent = String(text);
    return node;
  }

  async function call(path, body) {
    const options = { headers: { "X-Review-Token": token } };
    if (body !== undefined) {
      options.method = "POST";
      options.headers["Content-Type"] = "application/json";
      options.body = JSON.stringify(body);
    }
    const response = await fetch(path, options);
    let data = {};
    try { data = await response.json(); } catch (e) { data = { error: "the server sent no answer" }; }
    if (!response.ok) throw new Error(data.error || ("refused (" + response.status + ")"));
    return data;
  }

  function say(text, bad) {
    const box = $("message");
    box.textContent = text;
    box.className = bad ? "bad" : "";
  }

  function percent(x) { return (x === null || x === undefined) ? "–" : (100 * x).toFixed(0) + "%"; }

  function choose(choice) {
    chosen = choice;
    $("chosen").textContent = choice ? choice.label : "nothing chosen";
    document.querySelectorAll(".choices li").forEach((li) => {
      li.classList.toggle("picked", !!choice && choice.action === "code" && li.dataset.code === choice.code);
    });
  }

  function codeChoice(item) {
    return { action: "code", code: item.code, label: item.code + " " + (item.title || "") };
  }

  function renderCandidates(title) {
    const list = $("candidates");
    list.replaceChildren();
    (title ? title.candidates : []).forEach((c, i) => {
      const li = el("li");
      li.dataset.code = c.code;
      li.append(el("span", "num", i + 1), el("span", "code", c.code), el("span", "name", c.title || "(not in the classification)"),
        el("span", "conf", percent(c.confidence)));
      const meter = el("span", "meter");
      const fill = el("i");
      fill.style.width = Math.round(100 * (c.confidence || 0)) + "%";
      meter.append(fill);
      li.append(meter);
      const seen = c.evidence.map((e) => "\u201c" + e.title + "\u201d " + e.records.toLocaleString()).join(" · ");
      li.append(el("span", "why", (c.group_title ? c.group + " " + c.group_title : c.group) +
        (seen ? " — seen as " + seen : " — no past records")));
      if (c.known) li.addEventListener("click", () => choose(codeChoice(c)));
      list.append(li);
    });
  }

  function renderTitle(title) {
    $("finished").hidden = !!title;
    const parts = ["written", "normalized", "qualifiers", "contexts", "position", "records"];
    if (!title) { parts.forEach((id) => { $(id).textContent = ""; }); $("examples").replaceChildren(); $("double").hidden = true; return; }
    $("written").textContent = title.written;
    $("normalized").textContent = title.normalized;
    const q = Object.entries(title.qualifiers || {}).map(([k, v]) => k + " " + v).join(", ");
    $("qualifiers").textContent = q ? "(" + q + ")" : "";
    $("contexts").textContent = title.contexts.length ? title.contexts.join(" · ") : "not given";
    $("position").textContent = "title " + title.position.toLocaleString() + " of the queue";
    $("records").textContent = title.records.toLocaleString();
    $("double").hidden = !(title.double && title.round > 1);
    const rows = title.examples.map((r) => {
      const tr = el("tr");
      tr.append(el("td", "", r.record_id || ""), el("td", "", r.title || ""), el("td", "", r.context || ""));
      return tr;
    });
    $("examples").replaceChildren(...rows);
  }

  function render(state) {
    view = state;
    $("coder").textContent = state.coder;
    $("threshold").textContent = (state.threshold === null || state.threshold === undefined) ? "" :
      "the machine accepts from " + percent(state.threshold) + " confidence";
    $("count-done").textContent = state.progress.done.toLocaleString();
    $("count-left").textContent = state.progress.left.toLocaleString();
    $("count-skipped").textContent = state.progress.skipped.toLocaleString();
    renderTitle(state.current);
    renderCandidates(state.current);
    $("remark").value = "";
    $("find").value = "";
    found = []; lit = -1; $("found").replaceChildren();
    choose(null);
    $("undo").disabled = !state.can_undo;
  }

  async function refresh() {
    try { render(await call("api/state")); } catch (e) { say(e.message, true); }
  }

  async function act(action) {
    if (busy || !view || !view.current) return;
    let code = "";
    if (action === "save") {
      if (!chosen) { say("choose a code first: a number, or / to look one up", true); return; }
      action = chosen.action; code = chosen.code || "";
    }
    busy = true;
    const title = view.current.written;
    const remark = $("remark").value;
    try {
      const answer = await call("api/decide", { title: view.current.key, action: action, code: code, remark: remark });
      render(answer.state);
      say((action === "skip" ? "put off: " + title : "saved: " + title + " \u2192 " + (code || "not codable")) +
        (remark ? " \u2014 note: " + remark : ""), false);
    } catch (e) { say(e.message, true); } finally { busy = false; }
  }

  async function undo() {
    if (busy) return;
    busy = true;
    try { render((await call("api/undo", {})).state); say("taken back; the title is yours again", false); }
    catch (e) { say(e.message, true); } finally { busy = false; }
  }

  function renderFound() {
    const list = $("found");
    list.replaceChildren(...found.map((r, i) => {
      const li = el("li", i === lit ? "lit" : "");
      li.dataset.code = r.code;
      li.append(el("span", "num", ""), el("span", "code", r.code), el("span", "name", r.title), el("span", "conf", r.similarity.toFixed(0)));
      li.append(el("span", "why", (r.group_title ? r.group_title + " — " : "") + "matched \u201c" + r.matched + "\u201d, " +
        r.records.toLocaleString() + " past records"));
      li.addEventListener("click", () => { choose(codeChoice(r)); $("find").blur(); });
      return li;
    }));
    if (chosen) choose(chosen);
  }

  async function lookUp() {
    const seq = ++searchSeq;
    const text = $("find").value;
    if (!text.trim()) { found = []; lit = -1; renderFound(); return; }
    try {
      const data = await call("api/search?q=" + encodeURIComponent(text));
      if (seq !== searchSeq) return; // a newer keystroke already asked
      found = data.results; lit = found.length ? 0 : -1; renderFound();
    } catch (e) { say(e.message, true); }
  }

  function onFindKey(event) {
    if (event.key === "ArrowDown" || event.key === "ArrowUp") {
      event.preventDefault();
      if (!found.length) return;
      lit = (lit + (event.key === "ArrowDown" ? 1 : found.length - 1)) % found.length;
      renderFound();
    } else if (event.key === "Enter") {
      event.preventDefault();
      if (lit >= 0 && found[lit]) { choose(codeChoice(found[lit])); $("find").blur(); }
    } else if (event.key === "Escape") {
      $("find").blur();
    }
  }

  function onKey(event) {
    if (event.target === $("find") || event.ctrlKey || event.metaKey || event.altKey) return;
    if (event.target === $("remark")) {
      if (event.key === "Enter" || event.key === "Escape") { event.preventDefault(); $("remark").blur(); }
      return;
    }
    if ($("keys").open) return;
    const key = event.key;
    if (key === "Enter" && event.target && event.target.tagName === "BUTTON") return; // the button's own click
    if (/^[1-9]$/.test(key)) {
      const c = view && view.current && view.current.candidates[Number(key) - 1];
      if (c && c.known) choose(codeChoice(c));
    } else if (key === "/") { event.preventDefault(); $("find").focus(); $("find").select(); }
    else if (key === "Enter") { event.preventDefault(); act("save"); }
    else if (key === "x") {
      const residual = view && view.residual_code;
      choose({ action: "uncodable", code: residual || "", label: "not codable" + (residual ? " (" + residual + ")" : "") });
    }
    else if (key === "p") act("skip");
    else if (key === "z") undo();
    else if (key === "n") { event.preventDefault(); $("remark").focus(); }
    else if (key === "?") $("keys").showModal();
    else return;
  }

  document.addEventListener("DOMContentLoaded", () => {
    document.addEventListener("keydown", onKey);
    $("find").addEventListener("input", lookUp);
    $("find").addEventListener("keydown", onFindKey);
    $("save").addEventListener("click", () => act("save"));
    $("later").addEventListener("click", () => act("skip"));
    $("uncodable").addEventListener("click", () => onKey({ key: "x", target: document.body }));
    $("undo").addEventListener("click", undo);
    $("show-keys").addEventListener("click", () => $("keys").showModal());
    refresh();
  });
})();
