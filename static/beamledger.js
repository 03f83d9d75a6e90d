/* Beamledger — a little plain JavaScript where it helps; every page works without it.
   1. Arrow-key movement inside the week calendar.
   2. Drag-and-drop upload of several images, one request per file, each with a progress bar.
   3. Polling the session's images and flags while analysis is still running.
   4. Select-all on focus for the calendar feed addresses. */
(function () {
  "use strict";
  document.documentElement.classList.add("js");

  function ready(fn) {
    if (document.readyState !== "loading") fn();
    else document.addEventListener("DOMContentLoaded", fn);
  }

  /* 1. Week calendar: arrows move between slots (same column up/down, same row left/right). */
  function weekGrid(table) {
    var cells = {};
    table.querySelectorAll("[data-row][data-col]").forEach(function (el) {
      cells[el.dataset.row + ":" + el.dataset.col] = el;
    });
    var rows = table.querySelectorAll("tbody tr").length;
    var moves = { ArrowUp: [-1, 0], ArrowDown: [1, 0], ArrowLeft: [0, -1], ArrowRight: [0, 1] };
    table.addEventListener("keydown", function (event) {
      var move = moves[event.key];
      var here = event.target.closest("[data-row][data-col]");
      if (!move || !here) return;
      var r = parseInt(here.dataset.row, 10), c = parseInt(here.dataset.col, 10);
      // Blocks span several rows: step over the slots a booking covers.
      for (var step = 1; step <= rows; step++) {
        var target = cells[(r + move[0] * step) + ":" + (c + move[1] * step)];
        if (target) { event.preventDefault(); target.focus(); return; }
        if (r + move[0] * step < 0 || r + move[0] * step >= rows) return;
        if (c + move[1] * step < 0 || c + move[1] * step > 6) return;
      }
    });
  }

  /* 3. Live images and flags. */
  function liveSession(section) {
    var url = section.dataset.liveUrl;
    var status = document.querySelector("[data-live-status]");
    var timer = null;

    function pending() {
      var box = document.getElementById("images-live");
      return box ? parseInt(box.dataset.pending || "0", 10) : 0;
    }

    function swap(fresh) {
      var images = fresh.getElementById("images-live");
      var oldImages = document.getElementById("images-live");
      if (images && oldImages) oldImages.replaceWith(images);
      var flags = fresh.getElementById("flags-live");
      var oldFlags = document.getElementById("flags-live");
      if (flags && oldFlags && flags.dataset.signature !== oldFlags.dataset.signature) {
        // Never pull a form away from someone typing a dismissal reason.
        if (!oldFlags.contains(document.activeElement)) oldFlags.replaceWith(flags);
      }
      if (status) {
        var done = document.querySelectorAll('#images-live [data-state="done"]').length;
        var open = document.querySelectorAll("#flags-live .flag:not(.dismissed)").length;
        status.textContent = done + " image" + (done === 1 ? "" : "s") + " analysed, " +
          pending() + " waiting, " + open + " open flag" + (open === 1 ? "" : "s") + ".";
      }
    }

    function refresh() {
      timer = null;
      return fetch(url, { headers: { Accept: "text/html" }, credentials: "same-origin" })
        .then(function (response) { return response.ok ? response.text() : ""; })
        .then(function (html) {
          if (html) swap(new DOMParser().parseFromString(html, "text/html"));
          if (pending() > 0) schedule();
        })
        .catch(function () { schedule(); });
    }

    function schedule() {
      if (!timer) timer = window.setTimeout(refresh, 2000);
    }

    if (pending() > 0) schedule();
    return { refresh: refresh };
  }

  /* 2. Upload: each file is its own request, so one bad file does not sink the others. */
  function uploader(form, live) {
    var input = form.querySelector('input[type="file"]');
    var zone = form.querySelector("[data-dropzone]");
    var list = form.querySelector("[data-progress]");
    var token = form.querySelector('input[name="csrfmiddlewaretoken"]').value;

    function sendOne(file) {
      return new Promise(function (resolve) {
        var item = document.createElement("li");
        var text = document.createElement("span");
        var bar = document.createElement("progress");
        bar.max = 100; bar.value = 0;
        bar.setAttribute("aria-label", "Upload of " + file.name);
        text.textContent = file.name + ": uploading…";
        item.appendChild(text); item.appendChild(bar);
        list.appendChild(item);
        var data = new FormData();
        data.append("csrfmiddlewaretoken", token);
        data.append("files", file, file.name);
        var xhr = new XMLHttpRequest();
        xhr.open("POST", form.action);
        xhr.setRequestHeader("Accept", "application/json");
        xhr.upload.addEventListener("progress", function (event) {
          if (event.lengthComputable) bar.value = Math.round((event.loaded / event.total) * 100);
        });
        xhr.addEventListener("load", function () {
          var message = "done";
          try {
            var result = JSON.parse(xhr.responseText).results[0];
            message = result.message;
            item.className = result.ok ? "ok" : "error";
          } catch (e) {
            message = "the server answered " + xhr.status;
            item.className = "error";
          }
          bar.value = 100;
          text.textContent = file.name + ": " + message;
          resolve();
        });
        xhr.addEventListener("error", function () {
          item.className = "error";
          text.textContent = file.name + ": the upload did not reach the server; try again.";
          resolve();
        });
        xhr.send(data);
      });
    }

    function sendAll(files) {
      var chain = Promise.resolve();
      Array.prototype.forEach.call(files, function (file) {
        chain = chain.then(function () { return sendOne(file); });
      });
      return chain.then(function () {
        input.value = "";
        if (live) return live.refresh();
      });
    }

    form.addEventListener("submit", function (event) {
      event.preventDefault();
      if (input.files.length) sendAll(input.files);
    });
    input.addEventListener("change", function () {
      if (input.files.length) sendAll(input.files);
    });
    ["dragenter", "dragover"].forEach(function (name) {
      zone.addEventListener(name, function (event) {
        event.preventDefault();
        zone.classList.add("over");
      });
    });
    ["dragleave", "drop"].forEach(function (name) {
      zone.addEventListener(name, function () { zone.classList.remove("over"); });
    });
    zone.addEventListener("drop", function (event) {
      event.preventDefault();
      if (event.dataTransfer && event.dataTransfer.files.length) sendAll(event.dataTransfer.files);
    });
  }

  ready(function () {
    document.querySelectorAll("[data-week-grid]").forEach(weekGrid);
    var section = document.querySelector("[data-live-url]");
    var live = section ? liveSession(section) : null;
    document.querySelectorAll("form[data-upload]").forEach(function (form) { uploader(form, live); });
    document.querySelectorAll("[data-select-on-focus]").forEach(function (el) {
      el.addEventListener("focus", function () { el.select(); });
    });
  });
})();
