// The review page: one doubtful string at a time, decided with keys or buttons.
// Keys: 1-3 pick a candidate, n not a place, s skip, / type an ISO 3166 code.
// Each decision is sent at once (JSON, with the session's CSRF token) and the
// next item shows. Nothing here builds HTML from text: only textContent.
"use strict";

(function () {
  const meta = document.querySelector('meta[name="geonorm-csrf"]');
  const list = document.getElementById("items");
  if (!meta || !list) {
    return; // the login page
  }
  const csrf = meta.content;
  // The exact texts (HTML attributes cannot carry every string).
  const texts = JSON.parse(document.getElementById("texts").textContent);
  const items = Array.from(list.querySelectorAll(":scope > li.item"));
  const progress = document.getElementById("progress");
  const message = document.getElementById("message");
  const done = document.getElementById("done");
  const codeForm = document.getElementById("code-form");
  const codeInput = document.getElementById("code-input");
  const codeStatus = document.getElementById("code-status");
  const codeCancel = document.getElementById("code-cancel");
  let current = -1;
  let busy = false;
  let codes = null;
  let decided = 0;

  function say(text, problem) {
    message.textContent = text;
    message.classList.toggle("problem", Boolean(problem));
  }

  function remaining() {
    return items.filter((li) => !li.dataset.state).length;
  }

  function show(index) {
    items.forEach((li, i) => {
      li.hidden = i !== index;
    });
    current = index;
    closeCode();
    const left = remaining();
    progress.textContent =
      left + " left to review" + (decided ? " · " + decided + " stored" : "");
    if (index < 0) {
      done.hidden = false;
      done.querySelector("a").focus();
      return;
    }
    items[index].querySelector("h2").focus();
  }

  function nextFrom(index) {
    for (let step = 1; step <= items.length; step += 1) {
      const i = (index + step) % items.length;
      if (!items[i].dataset.state) {
        return i;
      }
    }
    return -1;
  }

  function advance() {
    show(nextFrom(current));
  }

  async function store(decision, label) {
    if (busy || current < 0) {
      return;
    }
    const li = items[current];
    busy = true;
    li.setAttribute("aria-busy", "true");
    try {
      const body = Object.assign({ text: texts[Number(li.dataset.index)] }, decision);
      const response = await fetch("/review/decisions", {
        method: "POST",
        credentials: "same-origin",
        headers: { "Content-Type": "application/json", "X-CSRF-Token": csrf },
        body: JSON.stringify(body),
      });
      let answer = {};
      try {
        answer = await response.json();
      } catch (err) {
        answer = {};
      }
      if (!response.ok) {
        const detail = (answer.problems || [])
          .map((p) => (typeof p === "string" ? p : p.reason || p.message || JSON.stringify(p)))
          .join("; ");
        const text = [answer.error || "the decision was not stored", detail, answer.hint]
          .filter(Boolean)
          .join(" — ");
        say("Not stored: " + text, true);
        return;
      }
      li.dataset.state = "decided";
      decided += 1;
      say("Stored: “" + li.dataset.text + "” → " + label, false);
      advance();
    } catch (err) {
      say("Not stored: the service did not answer (" + err + "). Try again.", true);
    } finally {
      busy = false;
      li.removeAttribute("aria-busy");
    }
  }

  function pick(number) {
    if (current < 0) {
      return;
    }
    const button = items[current].querySelector('button[data-action="pick"][data-key="' + number + '"]');
    if (!button) {
      say("There is no candidate " + number + " for this text.", true);
      return;
    }
    store(
      {
        country: button.dataset.country,
        subdivision: button.dataset.subdivision,
        city: button.dataset.city,
      },
      button.querySelector(".place").textContent,
    );
  }

  function skip() {
    if (current < 0) {
      return;
    }
    say("Skipped “" + items[current].dataset.text + "”.", false);
    advance();
  }

  // -- typing a code ------------------------------------------------------------
  async function loadCodes() {
    if (codes) {
      return codes;
    }
    const response = await fetch("/review/codes.json", { credentials: "same-origin" });
    codes = await response.json();
    return codes;
  }

  function placeOfCode(raw) {
    const code = raw.trim().toUpperCase();
    if (!codes || !code) {
      return { ok: false, text: "" };
    }
    if (codes.countries[code]) {
      return { ok: true, code: code, country: code, subdivision: "", text: codes.countries[code] };
    }
    if (codes.subdivisions[code]) {
      const country = code.split("-")[0];
      return {
        ok: true,
        code: code,
        country: country,
        subdivision: code,
        text: codes.subdivisions[code] + ", " + (codes.countries[country] || country),
      };
    }
    const partial =
      Object.keys(codes.countries).some((c) => c.startsWith(code)) ||
      Object.keys(codes.subdivisions).some((c) => c.startsWith(code));
    return {
      ok: false,
      text: partial
        ? "Keep typing: " + code + " is the start of a code."
        : code + " is not an ISO 3166 country or subdivision code.",
    };
  }

  function checkCode() {
    const found = placeOfCode(codeInput.value);
    codeInput.setAttribute("aria-invalid", found.ok || !codeInput.value ? "false" : "true");
    codeStatus.textContent = found.ok ? found.code + ": " + found.text : found.text;
    codeStatus.classList.toggle("problem", !found.ok && Boolean(codeInput.value.trim()));
    return found;
  }

  function openCode() {
    if (current < 0) {
      return;
    }
    items[current].appendChild(codeForm);
    codeForm.hidden = false;
    codeInput.value = "";
    codeStatus.textContent = "";
    codeInput.focus();
    loadCodes().then(checkCode, () => {
      codeStatus.textContent = "The list of codes could not be loaded; reload the page.";
    });
  }

  function closeCode() {
    if (!codeForm.hidden) {
      codeForm.hidden = true;
      if (current >= 0) {
        items[current].querySelector("h2").focus();
      }
    }
  }

  codeInput.addEventListener("input", checkCode);
  codeForm.addEventListener("submit", (event) => {
    event.preventDefault();
    const found = checkCode();
    if (!found.ok) {
      codeInput.focus();
      return;
    }
    store({ country: found.country, subdivision: found.subdivision, city: "" }, found.code);
  });
  codeCancel.addEventListener("click", closeCode);
  codeInput.addEventListener("keydown", (event) => {
    if (event.key === "Escape") {
      event.preventDefault();
      closeCode();
    }
  });

  // -- buttons and keys ---------------------------------------------------------
  list.addEventListener("click", (event) => {
    const button = event.target.closest("button[data-action]");
    if (!button) {
      return;
    }
    const action = button.dataset.action;
    if (action === "pick") {
      pick(button.dataset.key);
    } else if (action === "not_a_place") {
      store({ not_a_place: true }, "not a place");
    } else if (action === "skip") {
      skip();
    } else if (action === "code") {
      openCode();
    }
  });

  document.addEventListener("keydown", (event) => {
    if (event.ctrlKey || event.metaKey || event.altKey || event.isComposing) {
      return;
    }
    const target = event.target;
    if (target instanceof HTMLInputElement || target instanceof HTMLTextAreaElement) {
      return;
    }
    const key = event.key;
    if (key === "1" || key === "2" || key === "3") {
      event.preventDefault();
      pick(key);
    } else if (key === "n" || key === "N") {
      event.preventDefault();
      store({ not_a_place: true }, "not a place");
    } else if (key === "s" || key === "S") {
      event.preventDefault();
      skip();
    } else if (key === "/") {
      event.preventDefault();
      openCode();
    }
  });

  loadCodes().catch(() => {});
  show(items.length ? 0 : -1);
  document.body.dataset.ready = "true";
})();
