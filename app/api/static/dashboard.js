// landlift dashboard: polls /v1/experiments and shows the skill curve of the selected one.
"use strict";
(function () {
  const POLL_MS = 5000;
  const tokenInput = document.getElementById("token");
  const statusLine = document.getElementById("status");
  const tbody = document.querySelector("#experiments tbody");
  // ?experiment=ID preselects one; otherwise the newest finished experiment is shown
  let selected = new URLSearchParams(location.search).get("experiment");
  let shownSkill = null;
  tokenInput.value = localStorage.getItem("landlift-token") || "";

  function headers() {
    const token = tokenInput.value.trim();
    return token ? { Authorization: "Bearer " + token } : {};
  }

  function cell(text, cls) {
    const td = document.createElement("td");
    td.textContent = text;
    if (cls) td.className = cls;
    return td;
  }

  async function errorText(resp) {
    try {
      const body = await resp.json();
      return body.error.message;
    } catch (e) {
      return resp.status + " " + resp.statusText;
    }
  }

  async function refresh() {
    let resp;
    try {
      resp = await fetch("/v1/experiments?limit=50", { headers: headers() });
    } catch (e) {
      statusLine.textContent = "Server unreachable";
      statusLine.className = "error";
      return;
    }
    if (!resp.ok) {
      statusLine.textContent = await errorText(resp);
      statusLine.className = "error";
      return;
    }
    const page = await resp.json();
    statusLine.className = "";
    statusLine.textContent = page.total + " experiment(s)";
    tbody.replaceChildren();
    if (!selected) {
      const done = page.items.find((e) => e.status === "done");
      if (done) {
        select(done);
        return;
      }
    }
    for (const exp of page.items) {
      const tr = document.createElement("tr");
      tr.dataset.id = exp.id;
      if (exp.id === selected) tr.className = "selected";
      tr.append(
        cell(exp.name),
        cell(exp.variable || ""),
        cell(exp.status, "status-" + exp.status),
        cell(Math.round((exp.progress || 0) * 100) + " %"),
        cell((exp.created_at || "").replace("T", " ").slice(0, 16))
      );
      tr.addEventListener("click", () => select(exp));
      tbody.append(tr);
      if (exp.id === selected) {
        showTitle(exp);
        if (exp.status === "done" && shownSkill !== exp.id) showSkill(exp);
      }
    }
  }

  function showTitle(exp) {
    document.getElementById("detail").hidden = false;
    document.getElementById("detail-title").textContent = exp.name + " (" + exp.id + ")";
    if (exp.status !== "done") {
      document.getElementById("detail-links").textContent =
        "Status: " + exp.status + (exp.job && exp.job.error ? " (" + exp.job.error + ")" : "");
    }
  }

  function select(exp) {
    selected = exp.id;
    shownSkill = null;
    document.getElementById("skill").removeAttribute("src");
    document.getElementById("detail-links").textContent = "";
    refresh();
  }

  async function showSkill(exp) {
    shownSkill = exp.id;
    const base = "/v1/experiments/" + encodeURIComponent(exp.id) + "/skill";
    const resp = await fetch(base + "?format=png", { headers: headers() });
    const links = document.getElementById("detail-links");
    if (!resp.ok) {
      links.textContent = await errorText(resp);
      return;
    }
    const img = document.getElementById("skill");
    img.src = URL.createObjectURL(await resp.blob());
    links.textContent = "Skill curve: " + base + "?format=json | csv | png";
    showHeadline(base);
  }

  function signed(x) {
    return x === null || x === undefined ? "n/a" : (x >= 0 ? "+" : "") + x.toFixed(2);
  }

  // the headline: weeks 3-4 (else the last window), the corrected gain when the run has one
  async function showHeadline(base) {
    const line = document.getElementById("headline");
    const resp = await fetch(base, { headers: headers() });
    if (!resp.ok) {
      line.textContent = "";
      return;
    }
    const curve = await resp.json();
    const w = curve.windows.find((x) => x.label === "weeks 3-4") || curve.windows[curve.windows.length - 1];
    if (!w) return;
    const corrected = w.gain_corrected !== undefined && w.gain_corrected !== null;
    const g = corrected ? w.gain_corrected : w.gain;
    const p = g.p_value === null ? "n/a" : g.p_value.toFixed(3);
    line.textContent =
      (corrected ? "Gain, corrected for scrambled states from other years" : "Gain") +
      ", " + w.label + ", region " + curve.region + ": " + signed(g.value) +
      " [" + signed(g.low) + ", " + signed(g.high) + "], p " + p +
      " (" + Math.round(100 * curve.confidence) + "% year-block bootstrap interval)";
  }

  document.getElementById("token-form").addEventListener("submit", (ev) => {
    ev.preventDefault();
    localStorage.setItem("landlift-token", tokenInput.value.trim());
    refresh();
  });
  refresh();
  setInterval(refresh, POLL_MS);
})();
