// Draws every figure a page embeds, marks the drawn traces with their test ids, and
// runs the sign-in and sign-out forms. Nothing here leaves the host: the plotting
// library is served by the service itself and the only requests go to /sign-in and /sign-out.
"use strict";

const PLOT_CONFIG = {displaylogo: false, responsive: true, modeBarButtonsToRemove: ["lasso2d", "select2d"]};

function markTraces(element, testids) {
  // Each drawn scatter trace group carries its trace (d3's binding); its index finds the test id.
  for (const node of element.querySelectorAll(".scatterlayer .trace")) {
    const calc = node.__data__;
    const trace = calc && calc[0] && calc[0].trace;
    if (trace && testids[trace.index]) {
      node.setAttribute("data-testid", testids[trace.index]);
    }
  }
}

function drawFigure(element) {
  const source = document.getElementById(element.dataset.figure);
  const figure = JSON.parse(source.textContent);
  const testids = figure.data.map((trace) => trace.testid || null);
  const data = figure.data.map((trace) => {
    const copy = Object.assign({}, trace);
    delete copy.testid;
    return copy;
  });
  return window.Plotly.newPlot(element, data, figure.layout, PLOT_CONFIG).then(() => {
    markTraces(element, testids);
    element.dataset.rendered = "true";
  });
}

function drawAll() {
  const plots = document.querySelectorAll("[data-figure]");
  if (plots.length === 0) {
    return;
  }
  Promise.all(Array.from(plots, drawFigure)).then(() => {
    document.body.dataset.plotsRendered = "true";
  });
}

function signIn(form) {
  form.addEventListener("submit", (event) => {
    event.preventDefault();
    const message = form.querySelector(".message");
    message.textContent = "";
    fetch("/sign-in", {
      method: "POST",
      headers: {"Content-Type": "application/json"},
      credentials: "same-origin",
      body: JSON.stringify({key: form.querySelector("input[name=key]").value}),
    }).then((response) => {
      if (response.status === 204) {
        window.location.assign(form.dataset.next || "/");
        return null;
      }
      return response.json().then((problem) => {
        message.textContent = problem.detail || "Sign-in failed.";
      });
    }).catch(() => {
      message.textContent = "The service did not answer.";
    });
  });
}

function signOut(button) {
  button.addEventListener("click", () => {
    fetch("/sign-out", {
      method: "POST",
      headers: {"Content-Type": "application/json"},
      credentials: "same-origin",
      body: "{}",
    }).then(() => {
      window.location.assign("/sign-in");
    });
  });
}

document.addEventListener("DOMContentLoaded", () => {
  drawAll();
  const form = document.getElementById("sign-in");
  if (form) {
    signIn(form);
  }
  const button = document.querySelector("[data-action=sign-out]");
  if (button) {
    signOut(button);
  }
});
