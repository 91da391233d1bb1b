// The runs page: lists runs with live progress, opens reports, submits batches.
// Every text that comes from the server is set with textContent, never parsed as HTML.
"use strict";

const TOKEN_KEY = "tailgauge-token";
const BUSY_POLL_MS = 2000;
const IDLE_POLL_MS = 15000;
let examples = {};
let timer = null;

function headers(extra) {
  const out = Object.assign({}, extra || {});
  const token = localStorage.getItem(TOKEN_KEY);
  if (token) out["Authorization"] = "Bearer " + token;
  return out;
}

function say(text, isError) {
  const box = document.getElementById("message");
  box.textContent = text;
  box.className = isError ? "error" : "";
}

function describeError(status, body) {
  if (body && Array.isArray(body.detail)) {
    return "refused (" + status + "):\n" + body.detail.map(
      (d) => (d.loc || []).join(".") + ": " + d.msg).join("\n");
  }
  return "refused (" + status + ")";
}

function cell(row, text, className) {
  const td = document.createElement("td");
  td.textContent = text;
  if (className) td.className = className;
  row.appendChild(td);
  return td;
}

async function openWithToken(event, url) {
  // A plain link cannot carry the Authorization header: fetch, then show the copy.
  if (!localStorage.getItem(TOKEN_KEY)) return;
  event.preventDefault();
  const reply = await fetch(url, { headers: headers() });
  if (!reply.ok) { say(describeError(reply.status, await reply.json().catch(() => null)), true); return; }
  const blob = await reply.blob();
  window.open(URL.createObjectURL(blob), "_blank");
}

function link(td, text, url) {
  const a = document.createElement("a");
  a.href = url;
  a.textContent = text;
  a.target = "_blank";
  a.rel = "noopener";
  a.addEventListener("click", (event) => openWithToken(event, url));
  td.appendChild(a);
}

function showRuns(runs) {
  const body = document.getElementById("run-rows");
  body.replaceChildren();
  if (runs.length === 0) {
    const row = body.insertRow();
    const td = cell(row, "No runs yet: submit a batch above.");
    td.colSpan = 5;
    return;
  }
  for (const run of runs) {
    const row = body.insertRow();
    row.dataset.runId = run.run_id;
    row.dataset.status = run.status;
    cell(row, run.name);
    cell(row, run.status, "status-" + run.status);
    const p = run.progress;
    const td = cell(row, "");
    const bar = document.createElement("progress");
    bar.max = Math.max(p.total, 1);
    bar.value = p.done;
    td.appendChild(bar);
    td.appendChild(document.createTextNode(" " + p.done + "/" + p.total +
      (p.failed ? " (" + p.failed + " failed)" : "")));
    cell(row, run.created_at.replace("T", " ").slice(0, 19) + " UTC");
    const open = cell(row, "");
    link(open, "report", "/v1/runs/" + encodeURIComponent(run.run_id) + "/report");
    link(open, "JSON", "/v1/runs/" + encodeURIComponent(run.run_id));
  }
}

async function refresh() {
  clearTimeout(timer);
  let busy = false;
  try {
    const reply = await fetch("/v1/runs?limit=50", { headers: headers() });
    const body = await reply.json();
    if (!reply.ok) { say(describeError(reply.status, body), true); }
    else {
      showRuns(body.runs);
      busy = body.runs.some((r) => r.status === "queued" || r.status === "running");
    }
  } catch (err) {
    say("the server did not answer: " + err, true);
  }
  timer = setTimeout(refresh, busy ? BUSY_POLL_MS : IDLE_POLL_MS);
}

async function submit(batch) {
  const reply = await fetch("/v1/runs", {
    method: "POST", body: JSON.stringify(batch),
    headers: headers({ "Content-Type": "application/json" }),
  });
  const body = await reply.json().catch(() => null);
  if (reply.ok) say("submitted: run " + body.run_id + " (" + body.status + ")", false);
  else say(describeError(reply.status, body), true);
  refresh();
}

async function loadExamples() {
  const select = document.getElementById("example");
  try {
    const spec = await (await fetch("/openapi.json")).json();
    const content = spec.paths["/v1/runs"].post.requestBody.content["application/json"];
    examples = content.examples || {};
  } catch (err) {
    examples = {};
  }
  select.replaceChildren();
  for (const [name, example] of Object.entries(examples)) {
    const option = document.createElement("option");
    option.value = name;
    option.textContent = (example.summary || name) + (example.description ? ": " + example.description : "");
    select.appendChild(option);
  }
  if (select.options.length === 0) {
    const option = document.createElement("option");
    option.textContent = "no examples on this server";
    option.value = "";
    select.appendChild(option);
  }
}

function start() {
  const token = document.getElementById("token");
  token.value = localStorage.getItem(TOKEN_KEY) || "";
  token.addEventListener("change", () => {
    if (token.value) localStorage.setItem(TOKEN_KEY, token.value);
    else localStorage.removeItem(TOKEN_KEY);
    refresh();
  });
  document.getElementById("from-file").addEventListener("submit", async (event) => {
    event.preventDefault();
    const file = document.getElementById("batch-file").files[0];
    if (!file) { say("choose a batch file first", true); return; }
    let batch;
    try { batch = JSON.parse(await file.text()); }
    catch (err) { say(file.name + " is not JSON: " + err.message, true); return; }
    submit(batch);
  });
  document.getElementById("from-example").addEventListener("submit", (event) => {
    event.preventDefault();
    const name = document.getElementById("example").value;
    if (!examples[name]) { say("choose an example first", true); return; }
    submit(examples[name].value);
  });
  loadExamples();
  refresh();
}

document.addEventListener("DOMContentLoaded", start);
