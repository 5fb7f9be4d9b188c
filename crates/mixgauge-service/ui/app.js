// The mixgauge page: upload or pick a dataset, start a sweep, follow it, read its report.
// Plain browser JavaScript, no build step; every request goes to this page's own server.
"use strict";

(function () {
  const TOKEN_KEY = "mixgauge.token";
  const POLL_MS = 1000;
  const LIST_POLL_MS = 5000;
  const FINAL = new Set(["succeeded", "failed", "cancelled"]);
  const TYPES = { csv: "text/csv", json: "application/json", npy: "application/x-npy" };

  const $ = (id) => document.getElementById(id);

  // ---- state ----------------------------------------------------------------------------
  let watched = null; // id of the sweep shown in the job panel
  let watchTicket = 0; // bumps whenever a different sweep is opened, ending older polls
  let pollTimer = null;
  let listTimer = null;
  let jobsNext = null;
  let reportUrl = null; // blob URL of the shown report's stylesheet
  let reportWatch = null; // follows the shown report's size, to keep its frame fitted
  const datasets = new Map();

  // ---- messages ---------------------------------------------------------------------------
  function showMessage(text, kind) {
    const box = $("message");
    box.textContent = text;
    box.className = "message " + (kind || "error");
    box.hidden = false;
  }

  function clearMessage() {
    $("message").hidden = true;
    $("message").textContent = "";
  }

  // ---- API --------------------------------------------------------------------------------
  class ApiError extends Error {
    constructor(message, status, code) {
      super(message);
      this.status = status;
      this.code = code;
    }
  }

  function token() {
    try {
      return sessionStorage.getItem(TOKEN_KEY) || "";
    } catch (_) {
      return "";
    }
  }

  async function api(path, options) {
    const opts = Object.assign({}, options || {});
    const headers = new Headers(opts.headers || {});
    const t = token();
    if (t) headers.set("Authorization", "Bearer " + t);
    opts.headers = headers;
    let response;
    try {
      response = await fetch(path, opts);
    } catch (e) {
      throw new ApiError("Could not reach the server (" + e.message + "). Is it still running?", 0, "network");
    }
    if (response.ok) return response;
    let message = "The server answered " + response.status + " " + response.statusText + ".";
    let code = "http_" + response.status;
    try {
      const body = await response.json();
      if (body && body.error && body.error.message) {
        message = body.error.message;
        code = body.error.code || code;
      }
    } catch (_) {
      // Not a JSON error body: keep the status line.
    }
    throw new ApiError(message, response.status, code);
  }

  async function apiJson(path, options) {
    const response = await api(path, options);
    if (response.status === 204) return null;
    return response.json();
  }

  function report(e) {
    showMessage(e instanceof ApiError ? e.message : String(e && e.message ? e.message : e));
  }

  // ---- token ------------------------------------------------------------------------------
  function showTokenStatus() {
    $("token-status").textContent = token() ? "(set for this tab)" : "(none set)";
  }

  function saveToken(event) {
    event.preventDefault();
    const value = $("token-input").value.trim();
    try {
      if (value) sessionStorage.setItem(TOKEN_KEY, value);
      else sessionStorage.removeItem(TOKEN_KEY);
    } catch (_) {
      showMessage("This browser does not let the page keep the token (session storage is off).");
      return;
    }
    $("token-input").value = "";
    showTokenStatus();
    clearMessage();
    refreshAll();
  }

  function clearToken() {
    try {
      sessionStorage.removeItem(TOKEN_KEY);
    } catch (_) {
      // Nothing kept.
    }
    $("token-input").value = "";
    showTokenStatus();
  }

  // ---- formatting -------------------------------------------------------------------------
  function when(ms) {
    if (typeof ms !== "number") return "";
    const d = new Date(ms);
    return d.toLocaleString(undefined, { dateStyle: "medium", timeStyle: "short" });
  }

  function shortId(id) {
    return id && id.startsWith("ds-") ? id.slice(0, 15) + "…" : id;
  }

  function datasetLabel(d) {
    return shortId(d.id) + " — " + d.rows + " rows × " + d.columns + " columns (" + d.format + ", " + when(d.created) + ")";
  }

  // ---- datasets ---------------------------------------------------------------------------
  async function loadDatasets(select) {
    const items = [];
    let after = null;
    for (let page = 0; page < 20; page += 1) {
      const q = "/v1/datasets?limit=100" + (after ? "&after=" + encodeURIComponent(after) : "");
      const body = await apiJson(q);
      items.push(...body.items);
      after = body.next;
      if (!after) break;
    }
    const box = $("dataset-select");
    const keep = select || box.value;
    datasets.clear();
    box.replaceChildren();
    if (items.length === 0) {
      box.append(new Option("No dataset yet: upload one", ""));
    } else {
      box.append(new Option("Choose a dataset", ""));
      items.sort((a, b) => b.created - a.created);
      for (const d of items) {
        datasets.set(d.id, d);
        box.append(new Option(datasetLabel(d), d.id));
      }
    }
    box.value = datasets.has(keep) ? keep : "";
    showDataset();
  }

  function showDataset() {
    const d = datasets.get($("dataset-select").value);
    const info = $("dataset-info");
    if (!d) {
      info.textContent = "";
      return;
    }
    const names = d.column_names.length > 12
      ? d.column_names.slice(0, 12).join(", ") + " and " + (d.column_names.length - 12) + " more"
      : d.column_names.join(", ");
    info.textContent = d.rows + " rows, " + d.columns + " numeric columns: " + names + ".";
  }

  async function upload(event) {
    event.preventDefault();
    clearMessage();
    const file = $("file-input").files[0];
    if (!file) {
      showMessage("Choose a file first.");
      return;
    }
    const ext = (file.name.split(".").pop() || "").toLowerCase();
    const type = TYPES[ext];
    if (!type) {
      showMessage("\"" + file.name + "\" does not end in .csv, .npy or .json, so the page cannot tell its format. Rename it with the right ending.");
      return;
    }
    const button = $("upload-button");
    button.disabled = true;
    button.textContent = "Uploading…";
    try {
      const d = await apiJson("/v1/datasets", {
        method: "POST",
        headers: { "Content-Type": type },
        body: file,
      });
      await loadDatasets(d.id);
      showMessage("Uploaded " + file.name + ": " + d.rows + " rows × " + d.columns + " columns.", "ok");
    } catch (e) {
      report(e);
    } finally {
      button.disabled = false;
      button.textContent = "Upload";
    }
  }

  // ---- settings ---------------------------------------------------------------------------
  // Component counts: "1..8", "1..=8", "2,4,6", "5", or a mix such as "1..4, 8".
  function parseCounts(text) {
    const out = [];
    const bad = () => new Error("\"" + text + "\" is not a list of component counts; write e.g. 1..8, 2,4,6 or 5.");
    const whole = (s) => {
      const t = s.trim();
      if (!/^\d+$/.test(t)) throw bad();
      return Number(t);
    };
    for (const part of text.split(",")) {
      const p = part.trim();
      if (!p) throw bad();
      const range = p.split("..");
      if (range.length === 2) {
        const a = whole(range[0]);
        const b = whole(range[1].replace(/^=/, ""));
        if (a > b) throw new Error("The range " + a + ".." + b + " is empty; write the smaller count first.");
        if (b - a > 1000) throw new Error("The range " + a + ".." + b + " is too long.");
        for (let k = a; k <= b; k += 1) out.push(k);
      } else if (range.length === 1) {
        out.push(whole(p));
      } else {
        throw bad();
      }
    }
    const sorted = [...new Set(out)].sort((x, y) => x - y);
    if (sorted.length === 0) throw bad();
    if (sorted[0] < 1) throw new Error("Component counts start at 1.");
    return sorted;
  }

  function wholeField(id, name, least) {
    const raw = $(id).value.trim();
    if (!/^\d+$/.test(raw) || Number(raw) < least) {
      throw new Error(name + " must be a whole number of at least " + least + ".");
    }
    return Number(raw);
  }

  function sweepRequest() {
    const dataset = $("dataset-select").value;
    if (!dataset) throw new Error("Upload a file or choose a dataset first.");
    const covariances = ["cov-full", "cov-diagonal"].filter((id) => $(id).checked).map((id) => $(id).value);
    if (covariances.length === 0) throw new Error("Tick at least one covariance shape.");
    const settings = {
      components: parseCounts($("components-input").value),
      covariances,
      folds: wholeField("folds-input", "Folds", 2),
      restarts: wholeField("restarts-input", "Starts per fit", 1),
      seed: wholeField("seed-input", "The random seed", 0),
    };
    const data = {};
    const columns = $("columns-input").value.split(",").map((s) => s.trim()).filter((s) => s);
    if (columns.length) data.columns = columns;
    const labels = $("labels-input").value.trim();
    if (labels) data.labels = labels;
    if ($("drop-incomplete").checked) data.drop_incomplete = true;
    if ($("standardise").checked) data.standardise = true;
    const body = { dataset, settings };
    if (Object.keys(data).length) body.data = data;
    return body;
  }

  async function start(event) {
    event.preventDefault();
    clearMessage();
    let body;
    try {
      body = sweepRequest();
    } catch (e) {
      showMessage(e.message);
      return;
    }
    const button = $("start-button");
    button.disabled = true;
    try {
      const made = await apiJson("/v1/sweeps", {
        method: "POST",
        headers: { "Content-Type": "application/json" },
        body: JSON.stringify(body),
      });
      await loadJobs();
      openJob(made.id);
    } catch (e) {
      report(e);
    } finally {
      button.disabled = false;
    }
  }

  // ---- one sweep --------------------------------------------------------------------------
  function openJob(id) {
    watchTicket += 1;
    watched = id;
    if (pollTimer) clearTimeout(pollTimer);
    pollTimer = null;
    if (location.hash !== "#" + id) history.replaceState(null, "", "#" + id);
    $("job-panel").hidden = false;
    $("job-title").textContent = "Sweep " + id;
    $("state").textContent = "loading…";
    $("state").dataset.state = "";
    $("progress-text").textContent = "";
    $("job-detail").textContent = "";
    $("job-error").hidden = true;
    $("cancel-button").hidden = true;
    hideReport();
    markOpen();
    poll(watchTicket);
  }

  async function poll(ticket) {
    if (ticket !== watchTicket) return;
    let job;
    try {
      job = await apiJson("/v1/sweeps/" + encodeURIComponent(watched));
    } catch (e) {
      if (ticket !== watchTicket) return;
      report(e);
      if (e.status === 404 || e.status === 401) {
        $("state").textContent = e.status === 404 ? "not found" : "not allowed";
        return;
      }
      pollTimer = setTimeout(() => poll(ticket), POLL_MS * 3);
      return;
    }
    if (ticket !== watchTicket) return;
    showJob(job);
    updateListed(job);
    if (FINAL.has(job.state)) {
      if (job.state === "succeeded") await showReport(job.id, ticket);
      return;
    }
    pollTimer = setTimeout(() => poll(ticket), POLL_MS);
  }

  function showJob(job) {
    const p = job.progress || { done: 0, total: 0 };
    const state = $("state");
    state.textContent = job.cancel_requested && !FINAL.has(job.state) ? job.state + " (cancelling)" : job.state;
    state.dataset.state = job.state;
    const bar = $("progress");
    bar.max = Math.max(1, p.total);
    bar.value = Math.min(p.done, bar.max);
    $("progress-text").textContent = p.done + " of " + p.total + " fits done";
    const s = job.settings || {};
    const parts = [];
    parts.push("Dataset " + shortId(job.dataset));
    if (s.components) parts.push("K " + s.components.join(", "));
    if (s.covariances) parts.push(s.covariances.join(" and "));
    if (s.folds) parts.push(s.folds + " folds");
    if (s.restarts) parts.push(s.restarts + " starts per fit");
    if (typeof s.seed === "number") parts.push("seed " + s.seed);
    if (Array.isArray(job.finished) && !FINAL.has(job.state)) parts.push(job.finished.length + " candidates complete");
    parts.push("created " + when(job.created));
    $("job-detail").textContent = parts.join(" · ");
    $("cancel-button").hidden = FINAL.has(job.state) || job.cancel_requested;
    const err = $("job-error");
    if (job.state === "failed" && job.error) {
      err.textContent = "The sweep failed: " + job.error;
      err.hidden = false;
    } else {
      err.hidden = true;
    }
  }

  async function cancel() {
    if (!watched) return;
    clearMessage();
    const button = $("cancel-button");
    button.disabled = true;
    try {
      const job = await apiJson("/v1/sweeps/" + encodeURIComponent(watched) + "/cancel", { method: "POST" });
      if (job && job.id === watched) showJob(job);
    } catch (e) {
      report(e);
    } finally {
      button.disabled = false;
    }
  }

  // ---- report -----------------------------------------------------------------------------
  function hideReport() {
    $("report-panel").hidden = true;
    if (reportWatch) reportWatch.disconnect();
    reportWatch = null;
    $("report-frame").onload = null;
    $("report-frame").removeAttribute("srcdoc");
    if (reportUrl) URL.revokeObjectURL(reportUrl);
    reportUrl = null;
  }

  // The report is a whole HTML document with one inline <style> block. It is fetched (so the
  // token is sent) and shown through srcdoc, which keeps this page's security policy: inline
  // styles are refused there, so the stylesheet is moved into a blob URL of its own.
  async function showReport(id, ticket) {
    let html;
    try {
      const response = await api("/v1/sweeps/" + encodeURIComponent(id) + "/report");
      html = await response.text();
    } catch (e) {
      if (ticket === watchTicket) report(e);
      return;
    }
    if (ticket !== watchTicket) return;
    // The style blocks are cut out of the text before it is parsed: a document parsed here
    // takes this page's policy too, which refuses each <style> it meets with a console error.
    // A style block's text ends at the first "</style", as the HTML parser ends it.
    const blocks = [];
    const rest = html.replace(/<style\b[^>]*>([\s\S]*?)<\/style\s*>/gi, (_, text) => {
      blocks.push(text);
      return "";
    });
    const css = blocks.join("\n");
    const doc = new DOMParser().parseFromString(rest, "text/html");
    for (const s of doc.querySelectorAll("style, script")) s.remove();
    hideReport();
    if (css) {
      reportUrl = URL.createObjectURL(new Blob([css], { type: "text/css" }));
      const link = doc.createElement("link");
      link.rel = "stylesheet";
      link.href = reportUrl;
      doc.head.append(link);
    }
    const frame = $("report-frame");
    frame.onload = () => watchFrame(frame);
    frame.srcdoc = "<!DOCTYPE html>\n" + doc.documentElement.outerHTML;
    $("report-panel").hidden = false;
  }

  // Fits the frame to the report now and whenever the report's size changes: a narrower
  // window makes it longer, opening a folded cell too. (The frame runs no script; the
  // observer is this page's, watching the frame's document.)
  function watchFrame(frame) {
    fitFrame(frame);
    if (reportWatch) reportWatch.disconnect();
    reportWatch = null;
    try {
      const root = frame.contentDocument && frame.contentDocument.documentElement;
      if (root && typeof ResizeObserver === "function") {
        reportWatch = new ResizeObserver(() => fitFrame(frame));
        reportWatch.observe(root);
      }
    } catch (_) {
      // Not readable: the frame keeps the height it was given.
    }
  }

  // Sizes the frame to its content, so the report scrolls with the page rather than inside
  // it. The root element's own box is measured, not its scrollHeight, which is never less
  // than the frame's current height and so could only ever grow.
  function fitFrame(frame) {
    try {
      const inner = frame.contentDocument;
      if (!inner || !inner.documentElement) return;
      const height = Math.ceil(inner.documentElement.getBoundingClientRect().height);
      frame.style.height = height + 24 + "px";
    } catch (_) {
      // Not readable: the frame keeps its stylesheet height and scrolls.
    }
  }

  // ---- the list of sweeps ----------------------------------------------------------------
  function jobItem(job) {
    const li = document.createElement("li");
    li.dataset.id = job.id;
    const button = document.createElement("button");
    button.type = "button";
    button.className = "job";
    button.addEventListener("click", () => {
      clearMessage();
      openJob(job.id);
    });
    const name = document.createElement("span");
    name.className = "job-id";
    const state = document.createElement("span");
    state.className = "badge";
    const small = document.createElement("span");
    small.className = "job-meta";
    button.append(name, state, small);
    li.append(button);
    fillItem(li, job);
    return li;
  }

  function fillItem(li, job) {
    const p = job.progress || { done: 0, total: 0 };
    li.dataset.state = job.state;
    li.querySelector(".job-id").textContent = job.id;
    const badge = li.querySelector(".badge");
    badge.textContent = job.state;
    badge.dataset.state = job.state;
    li.querySelector(".job-meta").textContent = p.done + "/" + p.total + " fits · " + when(job.created);
    li.querySelector("button").setAttribute("aria-label", "Open sweep " + job.id + ", " + job.state);
  }

  function markOpen() {
    for (const li of $("job-list").children) {
      li.classList.toggle("open", li.dataset.id === watched);
      li.querySelector("button").setAttribute("aria-current", li.dataset.id === watched ? "true" : "false");
    }
  }

  function updateListed(job) {
    for (const li of $("job-list").children) {
      if (li.dataset.id === job.id) fillItem(li, job);
    }
  }

  async function loadJobs(more) {
    const after = more ? jobsNext : null;
    const body = await apiJson("/v1/sweeps?limit=50" + (after ? "&after=" + encodeURIComponent(after) : ""));
    const list = $("job-list");
    if (!more) list.replaceChildren();
    for (const job of body.items) list.append(jobItem(job));
    jobsNext = body.next;
    $("jobs-more").hidden = !jobsNext;
    $("job-list-empty").hidden = list.children.length > 0;
    markOpen();
    scheduleListPoll();
  }

  // While a listed sweep is still queued or running, reload the list now and then.
  function scheduleListPoll() {
    if (listTimer) clearTimeout(listTimer);
    listTimer = null;
    const busy = [...$("job-list").children].some((li) => !FINAL.has(li.dataset.state));
    if (busy) {
      listTimer = setTimeout(() => loadJobs().catch(() => scheduleListPoll()), LIST_POLL_MS);
    }
  }

  // ---- start-up ---------------------------------------------------------------------------
  async function refreshAll() {
    try {
      await Promise.all([loadDatasets(), loadJobs()]);
    } catch (e) {
      report(e);
    }
  }

  function openFromHash() {
    const id = decodeURIComponent(location.hash.slice(1));
    if (/^sw-\d+$/.test(id) && id !== watched) openJob(id);
  }

  document.addEventListener("DOMContentLoaded", () => {
    $("token-form").addEventListener("submit", saveToken);
    $("token-clear").addEventListener("click", clearToken);
    $("upload-form").addEventListener("submit", upload);
    $("dataset-select").addEventListener("change", showDataset);
    $("dataset-refresh").addEventListener("click", () => {
      clearMessage();
      loadDatasets().catch(report);
    });
    $("settings-form").addEventListener("submit", start);
    $("cancel-button").addEventListener("click", cancel);
    $("jobs-refresh").addEventListener("click", () => {
      clearMessage();
      loadJobs().catch(report);
    });
    $("jobs-more").addEventListener("click", () => loadJobs(true).catch(report));
    window.addEventListener("hashchange", openFromHash);
    showTokenStatus();
    refreshAll();
    openFromHash();
  });
})();
